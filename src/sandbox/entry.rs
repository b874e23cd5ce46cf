//! The child process's side: read one task from stdin, run it with the
//! engine, write JSON lines to stdout. Progress lines are throttled so that a
//! fast evaluation does not flood the parent.

use std::io::{BufRead, Write};
use std::sync::Mutex;
use std::time::{Duration, Instant};

use super::cpu_lock::FileCpuLock;
use super::hold::Holding;
use super::protocol::{Evaluated, Failure, Message, Task};
use crate::engine::{self, EngineResult, Hooks, Stage};

fn emit(out: &Mutex<std::io::Stdout>, message: &Message) {
    let mut line = serde_json::to_vec(message).expect("messages serialize");
    line.push(b'\n');
    let mut out = out.lock().unwrap_or_else(|p| p.into_inner());
    // A parent that went away cannot be told anything; the child just ends.
    let _ = out.write_all(&line).and_then(|_| out.flush());
}

/// Runs the task read from stdin; the exit code is 0 whenever an answer
/// (success or a typed failure) was written.
pub fn run_from_stdin() -> i32 {
    // tract may panic on graphs it cannot handle (the engine catches that).
    // The default hook would symbolize a backtrace, which can itself run out
    // of memory right after a failed allocation and deadlock the process.
    std::panic::set_hook(Box::new(|info| {
        let _ = writeln!(std::io::stderr(), "engine panic: {info}");
    }));
    let mut input = String::new();
    if std::io::stdin().lock().read_line(&mut input).is_err() {
        return 2;
    }
    let task: Task = match serde_json::from_str(&input) {
        Ok(t) => t,
        Err(e) => {
            eprintln!("unreadable task: {e}");
            return 2;
        }
    };
    let out = Mutex::new(std::io::stdout());
    let answer = match run(task, &out) {
        Ok(m) => m,
        Err(e) => Message::Failed(Failure::from(&e)),
    };
    emit(&out, &answer);
    0
}

fn run(task: Task, out: &Mutex<std::io::Stdout>) -> EngineResult<Message> {
    match task {
        Task::InspectModel { path } => Ok(Message::Model(Box::new(engine::inspect_model(&path)?))),
        Task::InspectBundle { bundle, out } => Ok(Message::Model(Box::new(
            engine::inspect_bundle(&bundle, &out)?,
        ))),
        Task::InspectDataset { path } => Ok(Message::Dataset(engine::inspect_dataset(&path)?)),
        Task::Preflight { job } => engine::prepare(&job).map(|_| Message::Preflighted),
        Task::Evaluate {
            job,
            options,
            cpu_lock,
            hold,
        } => {
            let lock = FileCpuLock::open(&cpu_lock)?;
            let holding = Holding::new(hold);
            let last = Mutex::new((None::<Stage>, Instant::now()));
            let progress = |stage: Stage, done: u64, total: u64| {
                {
                    let mut last = last.lock().unwrap_or_else(|p| p.into_inner());
                    let due = last.0 != Some(stage)
                        || done == total
                        || last.1.elapsed() >= Duration::from_millis(200);
                    if due {
                        *last = (Some(stage), Instant::now());
                        emit(out, &Message::Progress { stage, done, total });
                    }
                }
                holding.at(stage);
            };
            let hooks = Hooks {
                progress: &progress,
                cpu: &lock,
            };
            let outcome = engine::evaluate(&job, &options, &hooks)?;
            Ok(Message::Evaluated(Box::new(Evaluated {
                report: outcome.report,
                rounds: outcome.rounds,
            })))
        }
    }
}
