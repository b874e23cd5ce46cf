//! Running one engine task in a child process of the same binary, under an
//! address-space cap and a wall-time limit, so that a model that panics,
//! aborts or exhausts memory ends that task only, never the service.

use std::os::unix::process::ExitStatusExt;
use std::path::PathBuf;
use std::process::Stdio;
use std::time::Duration;

use tokio::io::{AsyncBufReadExt, AsyncReadExt, AsyncWriteExt, BufReader};
use tokio::process::Command;
use tokio_util::sync::CancellationToken;

use super::protocol::{Message, Task};
use crate::engine::Stage;

/// The hidden subcommand a child runs.
pub const CHILD_COMMAND: &str = "child";

#[derive(Debug, Clone)]
pub struct Limits {
    /// Address-space cap of the child (RLIMIT_AS); `None` for no cap.
    pub memory_bytes: Option<u64>,
    pub wall_time: Duration,
}

/// How a child ended.
#[derive(Debug)]
pub enum Ended {
    /// It wrote its answer (a result or a typed failure).
    Answer(Message),
    /// The cancellation token fired and the child was killed.
    Canceled,
    TimedOut,
    /// It died without an answer; the text says how, in words for a user.
    Crashed(String),
}

fn describe_crash(status: std::process::ExitStatus, stderr: &str, limits: &Limits) -> String {
    let memory = limits.memory_bytes.map(|b| format!("{} MiB", b >> 20));
    if stderr.contains("memory allocation of") || stderr.contains("out of memory") {
        return format!(
            "the engine ran out of memory (the limit per evaluation is {})",
            memory.unwrap_or_else(|| "the machine's".into())
        );
    }
    match (status.code(), status.signal()) {
        (_, Some(sig)) if sig == libc::SIGKILL => format!(
            "the engine process was killed (signal {sig}), most likely for exceeding memory \
             (limit {})",
            memory.unwrap_or_else(|| "none".into())
        ),
        (_, Some(sig)) => format!("the engine process crashed (signal {sig})"),
        (Some(code), _) => {
            format!("the engine process exited with status {code} without an answer")
        }
        _ => "the engine process ended without an answer".into(),
    }
}

/// Runs `task` in a child, passing progress to `on_progress`.
pub async fn run(
    exe: &PathBuf,
    task: &Task,
    limits: &Limits,
    cancel: &CancellationToken,
    mut on_progress: impl FnMut(Stage, u64, u64),
) -> std::io::Result<Ended> {
    let mut cmd = Command::new(exe);
    cmd.arg(CHILD_COMMAND)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        // Symbolizing a backtrace right after a failed allocation can
        // deadlock; the child reports panics in one line instead.
        .env("RUST_BACKTRACE", "0")
        .kill_on_drop(true);
    let cap = limits.memory_bytes;
    // SAFETY: prctl and setrlimit are async-signal-safe, as pre_exec requires.
    unsafe {
        cmd.pre_exec(move || {
            // A child must not outlive a service killed with -9: it would
            // keep the CPU lock and finish an evaluation nobody records.
            if libc::prctl(libc::PR_SET_PDEATHSIG, libc::SIGKILL) != 0 {
                return Err(std::io::Error::last_os_error());
            }
            if let Some(cap) = cap {
                let rl = libc::rlimit {
                    rlim_cur: cap,
                    rlim_max: cap,
                };
                if libc::setrlimit(libc::RLIMIT_AS, &rl) != 0 {
                    return Err(std::io::Error::last_os_error());
                }
            }
            Ok(())
        });
    }
    let mut child = cmd.spawn()?;
    let mut stdin = child.stdin.take().expect("stdin is piped");
    let mut line = serde_json::to_vec(task).expect("tasks serialize");
    line.push(b'\n');
    stdin.write_all(&line).await?;
    drop(stdin);

    let mut stderr = child.stderr.take().expect("stderr is piped");
    let stderr_tail = tokio::spawn(async move {
        let mut all = Vec::new();
        let _ = stderr.read_to_end(&mut all).await;
        let start = all.len().saturating_sub(8192);
        String::from_utf8_lossy(&all[start..]).into_owned()
    });
    let mut lines = BufReader::new(child.stdout.take().expect("stdout is piped")).lines();
    let deadline = tokio::time::sleep(limits.wall_time);
    tokio::pin!(deadline);
    let mut answer = None;
    loop {
        tokio::select! {
            next = lines.next_line() => match next? {
                Some(text) => match serde_json::from_str::<Message>(&text) {
                    Ok(Message::Progress { stage, done, total }) => on_progress(stage, done, total),
                    Ok(final_message) => answer = Some(final_message),
                    Err(e) => tracing::warn!("unreadable line from the engine process: {e}"),
                },
                None => break,
            },
            _ = cancel.cancelled() => {
                let _ = child.kill().await;
                return Ok(Ended::Canceled);
            }
            _ = &mut deadline => {
                let _ = child.kill().await;
                return Ok(Ended::TimedOut);
            }
        }
    }
    let status = child.wait().await?;
    let stderr = stderr_tail.await.unwrap_or_default();
    Ok(match answer {
        Some(m) => Ended::Answer(m),
        None => {
            tracing::warn!(%status, stderr = %stderr.trim(), "engine process ended without an answer");
            Ended::Crashed(describe_crash(status, &stderr, limits))
        }
    })
}
