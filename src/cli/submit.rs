//! `proctor submit`: the CI gate. Uploads what the server lacks, creates an
//! evaluation, waits for it, prints the ranked table and writes the
//! requested files. The exit code is the verdict.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::time::Duration;

use serde_json::Value;
use uuid::Uuid;

use super::client::{Client, Stored};
use super::exit::{EXIT_GO, EXIT_INPUT, EXIT_NO_GO, EXIT_SERVER, Exit};
use super::{junit, render};
use crate::engine::gates::{GateName, Gates};
use crate::engine::settings::RankBy;
use crate::report::{Report, Verdict};
use crate::service::{BaselineChoice, EvaluationRequest};
use crate::store::{DatasetRecord, EvaluationRecord, ModelRecord, Status};

#[derive(Debug, Clone, clap::Args)]
#[command(
    after_help = "Exit codes: 0 go, 1 no-go, 2 usage or input error, 3 server or network error."
)]
pub struct SubmitArgs {
    /// The Proctor service.
    #[arg(long, env = "PROCTOR_SERVER", default_value = "http://127.0.0.1:8080")]
    pub server: String,
    /// The teacher: an ONNX file, or the id of a stored model.
    #[arg(long, value_name = "FILE|ID")]
    pub teacher: String,
    /// A student (repeat for several): an ONNX file or a stored model's id.
    #[arg(long = "student", value_name = "FILE|ID", required = true)]
    pub students: Vec<String>,
    /// The evaluation set: an .npz or .npy file, or a stored set's id.
    #[arg(long, value_name = "FILE|ID")]
    pub data: String,
    /// A JSON file holding an object of gates, e.g. {"min_agreement": 0.95}.
    #[arg(long, value_name = "FILE")]
    pub gates: Option<PathBuf>,
    /// One gate (repeatable), e.g. --gate max_p90_ms=5; overrides --gates.
    #[arg(long = "gate", value_name = "NAME=VALUE")]
    pub gate: Vec<String>,
    #[arg(long)]
    pub temperature: Option<f64>,
    #[arg(long)]
    pub alpha: Option<f64>,
    /// agreement, kl, top1, p50_ms or bytes.
    #[arg(long)]
    pub rank_by: Option<String>,
    #[arg(long)]
    pub project: Option<String>,
    /// The student in production to compare every candidate with: "current"
    /// (the project's baseline), a stored model's id, or an ONNX file.
    #[arg(long, value_name = "current|ID|FILE")]
    pub baseline: Option<String>,
    /// A tag (repeatable), e.g. --tag commit=3f9c2e1.
    #[arg(long = "tag", value_name = "KEY=VALUE")]
    pub tags: Vec<String>,
    /// Print the evaluation id and exit without waiting.
    #[arg(long)]
    pub no_wait: bool,
    /// Write the full report as JSON here.
    #[arg(long, value_name = "PATH")]
    pub json: Option<PathBuf>,
    /// Write the gates as JUnit XML here.
    #[arg(long, value_name = "PATH")]
    pub junit: Option<PathBuf>,
    /// Write a Markdown summary here (for CI job pages).
    #[arg(long, value_name = "PATH")]
    pub summary: Option<PathBuf>,
}

fn input(message: impl Into<String>) -> Exit {
    Exit::input(message)
}

fn pair(s: &str, what: &str) -> Result<(String, String), Exit> {
    s.split_once('=')
        .map(|(k, v)| (k.trim().to_string(), v.trim().to_string()))
        .filter(|(k, _)| !k.is_empty())
        .ok_or_else(|| input(format!("{what} '{s}' must be NAME=VALUE")))
}

/// The gates: the file's, then each --gate over it. Checked here, before
/// any file is hashed, so that a typo fails at once.
fn gates(args: &SubmitArgs) -> Result<Gates, Exit> {
    let mut gates = match &args.gates {
        None => Gates::default(),
        Some(path) => {
            let text = std::fs::read_to_string(path)
                .map_err(|e| input(format!("cannot read {}: {e}", path.display())))?;
            serde_json::from_str::<Gates>(&text)
                .map_err(|e| input(format!("{}: {e}", path.display())))?
        }
    };
    for g in &args.gate {
        let (name, value) = pair(g, "--gate")?;
        let v: f64 = value
            .parse()
            .map_err(|_| input(format!("--gate {name} needs a number, not '{value}'")))?;
        if name == "confidence" {
            gates.confidence = Some(v);
            continue;
        }
        let gate = GateName::parse(&name).ok_or_else(|| {
            input(format!(
                "unknown gate '{name}'; known gates: {}",
                GateName::all_names()
            ))
        })?;
        gates.set(gate, v);
    }
    Ok(gates)
}

fn rank_by(args: &SubmitArgs) -> Result<RankBy, Exit> {
    match &args.rank_by {
        None => Ok(RankBy::default()),
        Some(r) => serde_json::from_value(Value::String(r.clone())).map_err(|_| {
            input(format!(
                "--rank-by must be agreement, kl, top1, p50_ms or bytes, not '{r}'"
            ))
        }),
    }
}

/// A file is uploaded (unless the server has it); anything else must be an id.
async fn resolve<T: Stored>(client: &Client, given: &str) -> Result<Uuid, Exit> {
    let path = Path::new(given);
    if path.is_file() {
        let (id, uploaded) = client.ensure::<T>(path).await?;
        let how = if uploaded {
            "uploaded"
        } else {
            "already stored"
        };
        eprintln!("{given}: {how} as {id}");
        return Ok(id);
    }
    Uuid::parse_str(given)
        .map_err(|_| input(format!("'{given}' is neither a file nor a stored id")))
}

/// Everything of the request that the arguments alone decide, checked
/// before any file is read.
fn settings_of(args: &SubmitArgs) -> Result<EvaluationRequest, Exit> {
    let nil = Uuid::nil();
    let mut body = EvaluationRequest::new(nil, vec![], nil);
    body.gates = gates(args)?;
    body.rank_by = rank_by(args)?;
    for t in &args.tags {
        let (k, v) = pair(t, "--tag")?;
        body.tags.insert(k, v);
    }
    body.temperature = args.temperature;
    body.alpha = args.alpha;
    if let Some(p) = &args.project {
        body.project = p.clone();
    }
    Ok(body)
}

/// Waits for the evaluation to finish, drawing its progress on stderr.
pub async fn wait(client: &Client, id: Uuid) -> Result<EvaluationRecord, Exit> {
    let live = std::io::stderr().is_terminal();
    let mut last_line = String::new();
    loop {
        let e = client.evaluation(id).await?;
        let (stage, done, total) = (e.progress.stage.as_str(), e.progress.done, e.progress.total);
        let pct = (100 * done).checked_div(total).unwrap_or(0);
        let line = if live {
            let filled = (pct / 5) as usize;
            format!(
                "{:>9} {stage:<8} [{}{}] {done}/{total}",
                e.status.as_str(),
                "#".repeat(filled),
                ".".repeat(20 - filled)
            )
        } else {
            // Plain lines: one per stage and per tenth of it.
            format!("{} {stage} {}%", e.status.as_str(), pct / 10 * 10)
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
        tokio::time::sleep(Duration::from_millis(if live { 200 } else { 500 })).await;
    }
}

/// Prints the table and writes the requested files.
pub fn publish(args: &SubmitArgs, report: &Report, raw: &str) -> Result<(), Exit> {
    print!("{}", render::table(report));
    let write = |path: &Path, text: String| {
        std::fs::write(path, text)
            .map_err(|e| input(format!("cannot write {}: {e}", path.display())))
    };
    if let Some(p) = &args.json {
        let pretty = serde_json::from_str::<Value>(raw)
            .and_then(|v| serde_json::to_string_pretty(&v))
            .unwrap_or_else(|_| raw.to_string());
        write(p, pretty)?;
    }
    if let Some(p) = &args.junit {
        write(p, junit::junit(report))?;
    }
    if let Some(p) = &args.summary {
        let base = args.server.trim_end_matches('/');
        let page = format!("{base}/evaluations/{}", report.evaluation);
        let json = format!("{base}/v1/evaluations/{}/report", report.evaluation);
        write(p, render::markdown(report, Some(&page), Some(&json)))?;
    }
    Ok(())
}

/// The whole submission; returns the exit code.
pub async fn run(args: &SubmitArgs) -> Result<i32, Exit> {
    let mut body = settings_of(args)?;
    let client = Client::new(&args.server);
    body.teacher = resolve::<ModelRecord>(&client, &args.teacher).await?;
    for s in &args.students {
        body.students
            .push(resolve::<ModelRecord>(&client, s).await?);
    }
    body.dataset = resolve::<DatasetRecord>(&client, &args.data).await?;
    body.baseline = match args.baseline.as_deref() {
        None => None,
        Some("current") => Some(BaselineChoice::Current),
        Some(given) => Some(BaselineChoice::Model(
            resolve::<ModelRecord>(&client, given).await?,
        )),
    };
    let created = client.create_evaluation(&body).await?;
    let id = created.id;
    if args.no_wait {
        println!("{id}");
        return Ok(EXIT_GO);
    }
    eprintln!("evaluation {id} queued");
    let done = wait(&client, id).await?;
    match done.status {
        Status::Succeeded => {}
        Status::Failed => {
            let (status, detail) = done
                .error
                .map_or((500, "no detail".to_string()), |p| (p.status, p.detail));
            let code = if status == 422 {
                EXIT_INPUT
            } else {
                EXIT_SERVER
            };
            return Err(Exit {
                code,
                message: format!("the evaluation failed: {detail}"),
            });
        }
        other => {
            return Err(Exit {
                code: EXIT_SERVER,
                message: format!("the evaluation ended {}", other.as_str()),
            });
        }
    }
    let (raw, report) = client.report(id).await?;
    publish(args, &report, &raw)?;
    Ok(match report.verdict {
        Verdict::Go => EXIT_GO,
        Verdict::NoGo => EXIT_NO_GO,
    })
}
