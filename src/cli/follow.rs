//! Following an evaluation to its end: progress on stderr (a bar on a
//! terminal, plain lines in a CI log), a time limit, and the step from an
//! ended evaluation to its report and exit code, shared by `submit`, `wait`
//! and `report`.

use std::io::IsTerminal;
use std::time::{Duration, Instant};

use uuid::Uuid;

use super::client::Client;
use super::exit::{EXIT_GO, EXIT_INPUT, EXIT_NO_GO, Exit};
use super::outputs::{OutputArgs, publish};
use crate::engine::Stage;
use crate::report::Verdict;
use crate::store::{EvaluationRecord, Status};

/// What a stage is called in a progress line.
fn stage_words(stage: Stage) -> &'static str {
    match stage {
        Stage::Waiting => "waiting for a worker",
        Stage::Loading => "loading the models",
        Stage::Bulk => "bulk pass",
        Stage::Timing => "timed rounds",
        Stage::Scoring => "scoring",
    }
}

/// One line of progress, e.g. "running: bulk pass 40 %".
pub fn progress_line(e: &EvaluationRecord) -> String {
    let p = &e.progress;
    match e.status {
        Status::Queued => "queued: waiting for a worker".into(),
        Status::Running if p.total > 0 => {
            let pct = 100 * p.done / p.total;
            format!("running: {} {pct} %", stage_words(p.stage))
        }
        Status::Running => format!("running: {}", stage_words(p.stage)),
        other => other.as_str().to_string(),
    }
}

/// Waits for the evaluation to end, drawing its progress on stderr, until
/// `deadline`; past it, the answer is exit 3 naming the evaluation.
pub async fn wait(
    client: &Client,
    id: Uuid,
    deadline: Option<Instant>,
) -> Result<EvaluationRecord, Exit> {
    let live = std::io::stderr().is_terminal();
    let mut last_line = String::new();
    loop {
        let e = client.evaluation(id).await?;
        let line = if live {
            let p = &e.progress;
            let pct = (100 * p.done).checked_div(p.total).unwrap_or(0);
            let filled = (pct / 5) as usize;
            format!(
                "{:<40} [{}{}] {}/{}",
                progress_line(&e),
                "#".repeat(filled),
                ".".repeat(20 - filled),
                p.done,
                p.total
            )
        } else {
            // Plain lines: one per stage and per tenth of it.
            let p = &e.progress;
            let tenth = (10 * p.done).checked_div(p.total).unwrap_or(0) * 10;
            match e.status {
                Status::Running if p.total > 0 => {
                    format!("running: {} {tenth} %", stage_words(p.stage))
                }
                _ => progress_line(&e),
            }
        };
        if line != last_line {
            if live {
                eprint!("\r{line}\x1b[K");
            } else {
                eprintln!("{line}");
            }
            last_line = line;
        }
        if e.status.is_finished() {
            if live {
                eprintln!();
            }
            return Ok(e);
        }
        if deadline.is_some_and(|d| Instant::now() >= d) {
            if live {
                eprintln!();
            }
            return Err(Exit::server(format!(
                "gave up waiting for evaluation {id}, which is still {}; it goes on: \
                 run `proctor wait {id}` to follow it again",
                e.status.as_str()
            )));
        }
        tokio::time::sleep(Duration::from_millis(if live { 200 } else { 500 })).await;
    }
}

/// From an ended evaluation to its outputs and exit code: 0 go, 1 no-go,
/// 2 when it failed on its input, 3 when it failed on our side or was canceled.
pub async fn conclude(
    client: &Client,
    done: &EvaluationRecord,
    outputs: &OutputArgs,
    base: &str,
) -> Result<i32, Exit> {
    match done.status {
        Status::Succeeded => {}
        Status::Failed => {
            let (status, detail) = done
                .error
                .as_ref()
                .map_or((500, "no detail"), |p| (p.status, p.detail.as_str()));
            let message = format!("evaluation {} failed: {detail}", done.id);
            return Err(if status < 500 {
                Exit::input(message)
            } else {
                Exit::server(message)
            });
        }
        other => {
            return Err(Exit::server(format!(
                "evaluation {} was {}",
                done.id,
                other.as_str()
            )));
        }
    }
    let (raw, report) = client.report(done.id).await?;
    publish(outputs, &report, &raw, base)?;
    Ok(match report.verdict {
        Verdict::Go => EXIT_GO,
        Verdict::NoGo => EXIT_NO_GO,
    })
}

/// `proctor wait ID`: follows an evaluation created earlier (e.g. with
/// `submit --no-wait`) and ends as `submit` would have.
#[derive(Debug, Clone, clap::Args)]
#[command(after_help = super::submit::EXIT_CODES)]
pub struct WaitCommand {
    /// The evaluation to follow.
    #[arg(value_name = "EVALUATION_ID")]
    pub evaluation: Uuid,
    #[command(flatten)]
    pub server: super::connection::ServerArgs,
    #[command(flatten)]
    pub wait: super::connection::WaitArgs,
    #[command(flatten)]
    pub outputs: OutputArgs,
}

pub async fn run_wait(args: &WaitCommand) -> Result<i32, Exit> {
    let client = Client::new(&args.server, args.wait.timeout)?;
    let deadline = args.wait.timeout.map(|t| Instant::now() + t);
    let done = wait(&client, args.evaluation, deadline).await?;
    conclude(&client, &done, &args.outputs, args.server.base()).await
}

/// `proctor report ID`: the outputs and exit code of an evaluation that has
/// ended, without waiting; one still running is exit 2, saying so.
#[derive(Debug, Clone, clap::Args)]
#[command(after_help = super::submit::EXIT_CODES)]
pub struct ReportCommand {
    /// The evaluation whose report to fetch.
    #[arg(value_name = "EVALUATION_ID")]
    pub evaluation: Uuid,
    #[command(flatten)]
    pub server: super::connection::ServerArgs,
    #[command(flatten)]
    pub outputs: OutputArgs,
}

pub async fn run_report(args: &ReportCommand) -> Result<i32, Exit> {
    let client = Client::new(&args.server, None)?;
    let e = client.evaluation(args.evaluation).await?;
    if !e.status.is_finished() {
        return Err(Exit {
            code: EXIT_INPUT,
            message: format!(
                "evaluation {} is still {}; `proctor wait {}` waits for it",
                e.id,
                e.status.as_str(),
                e.id
            ),
        });
    }
    conclude(&client, &e, &args.outputs, args.server.base()).await
}
