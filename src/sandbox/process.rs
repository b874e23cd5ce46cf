//! Starting one engine child of this same binary under an address-space cap
//! and a wall-time limit, feeding it a task and reading its lines, so that a
//! model that panics, aborts or exhausts memory ends that child only.

use std::os::unix::process::ExitStatusExt;
use std::path::Path;
use std::process::{ExitStatus, Stdio};
use std::time::Duration;

use tokio::io::{AsyncBufReadExt, AsyncReadExt, AsyncWriteExt, BufReader};
use tokio::process::Command;
use tokio_util::sync::CancellationToken;

use super::protocol::{Message, Task};
use crate::engine::Stage;

/// The hidden subcommand a child runs.
pub const CHILD_COMMAND: &str = "child";

/// How much of a child's stderr the parent keeps (its end says why it died).
const STDERR_TAIL: usize = 8192;

#[derive(Debug, Clone)]
pub struct Limits {
    /// Address-space cap of the child (RLIMIT_AS); `None` for no cap.
    pub memory_bytes: Option<u64>,
    pub wall_time: Duration,
}

/// The largest file a child may write (RLIMIT_FSIZE): it writes only the
/// teacher's cached scores.
const MAX_FILE_BYTES: u64 = 16 << 30;

/// Processes and threads the child's user may hold (RLIMIT_NPROC): enough
/// for the engine's threads, too few for a fork bomb.
const MAX_PROCESSES: u64 = 4096;

impl Limits {
    /// CPU seconds the child may use (RLIMIT_CPU): its wall time on every
    /// core, so that only a child spinning past its limit hits it.
    fn cpu_seconds(&self) -> u64 {
        let cores = std::thread::available_parallelism().map_or(1, |n| n.get()) as u64;
        self.wall_time.as_secs().max(1) * cores + 10
    }
}

/// Sets one resource limit in a freshly forked child (a macro, because
/// the resource's C type differs between C libraries).
macro_rules! limit {
    ($resource:expr, $value:expr) => {{
        let rl = libc::rlimit {
            rlim_cur: $value,
            rlim_max: $value,
        };
        if libc::setrlimit($resource, &rl) != 0 {
            return Err(std::io::Error::last_os_error());
        }
    }};
}

/// How a child ended.
#[derive(Debug)]
pub(super) enum Ended {
    /// It wrote its final answer (a result or a typed failure).
    Answer(Message),
    /// The cancellation token fired and the child was killed.
    Canceled,
    /// It ran past its wall-time limit and was killed.
    TimedOut,
    /// It ended without a readable answer.
    Died(Death),
}

/// What is known of a child that ended without an answer.
#[derive(Debug)]
pub(super) struct Death {
    pub(super) status: ExitStatus,
    pub(super) stderr_tail: String,
    /// A line it wrote that did not parse, with the reason.
    pub(super) unreadable: Option<String>,
}

impl Death {
    /// Whether the child died of its memory cap (an allocation failed and
    /// the process aborted, or the kernel killed it).
    pub(super) fn out_of_memory(&self) -> bool {
        self.stderr_tail.contains("memory allocation of")
            || self.stderr_tail.contains("out of memory")
            || self.status.signal() == Some(libc::SIGKILL)
    }

    /// Whether the child used up its CPU time.
    pub(super) fn out_of_cpu_time(&self) -> bool {
        self.status.signal() == Some(libc::SIGXCPU)
    }
}

/// Reads a stream to its end, keeping only its last `STDERR_TAIL` bytes.
async fn tail(mut from: impl tokio::io::AsyncRead + Unpin) -> String {
    let mut kept: Vec<u8> = Vec::with_capacity(STDERR_TAIL);
    let mut buf = vec![0u8; 4096];
    while let Ok(n) = from.read(&mut buf).await {
        if n == 0 {
            break;
        }
        kept.extend_from_slice(&buf[..n]);
        if kept.len() > STDERR_TAIL {
            kept.drain(..kept.len() - STDERR_TAIL);
        }
    }
    String::from_utf8_lossy(&kept).into_owned()
}

/// The command that starts a child under `limits`: an empty environment
/// and, set between fork and exec, its resource limits and death signal.
fn confined(exe: &Path, args: &[&str], limits: &Limits) -> Command {
    let mut cmd = Command::new(exe);
    cmd.args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        // The child learns everything from its task, nothing from the
        // service's environment (tokens, credentials, proxies).
        .env_clear()
        // Symbolizing a backtrace right after a failed allocation can
        // deadlock; the child reports panics in one line instead.
        .env("RUST_BACKTRACE", "0")
        .kill_on_drop(true);
    let (cap, cpu) = (limits.memory_bytes, limits.cpu_seconds());
    // SAFETY: prctl and setrlimit are async-signal-safe, as pre_exec requires.
    unsafe {
        cmd.pre_exec(move || {
            // A child must not outlive a service killed with -9: it would
            // keep the CPU lock and finish an evaluation nobody records.
            if libc::prctl(libc::PR_SET_PDEATHSIG, libc::SIGKILL) != 0 {
                return Err(std::io::Error::last_os_error());
            }
            if let Some(cap) = cap {
                limit!(libc::RLIMIT_AS, cap);
            }
            limit!(libc::RLIMIT_CPU, cpu);
            limit!(libc::RLIMIT_FSIZE, MAX_FILE_BYTES);
            limit!(libc::RLIMIT_NPROC, MAX_PROCESSES);
            limit!(libc::RLIMIT_CORE, 0);
            Ok(())
        });
    }
    cmd
}

/// Runs `task` in a child, passing progress to `on_progress`. The `Err`
/// case is an I/O fault of the parent (the child could not be started or
/// spoken to).
pub(super) async fn run(
    exe: &Path,
    task: &Task,
    limits: &Limits,
    cancel: Option<&CancellationToken>,
    mut on_progress: impl FnMut(Stage, u64, u64),
) -> std::io::Result<Ended> {
    let mut child = confined(exe, &[CHILD_COMMAND], limits).spawn()?;
    let mut stdin = child.stdin.take().expect("stdin is piped");
    let mut line = serde_json::to_vec(task).map_err(std::io::Error::other)?;
    line.push(b'\n');
    stdin.write_all(&line).await?;
    drop(stdin);

    let stderr_tail = tokio::spawn(tail(child.stderr.take().expect("stderr is piped")));
    let mut lines = BufReader::new(child.stdout.take().expect("stdout is piped")).lines();
    let deadline = tokio::time::sleep(limits.wall_time);
    tokio::pin!(deadline);
    let never = CancellationToken::new();
    let cancel = cancel.unwrap_or(&never);
    let (mut answer, mut unreadable) = (None, None);
    loop {
        tokio::select! {
            next = lines.next_line() => match next? {
                Some(text) => match serde_json::from_str::<Message>(&text) {
                    Ok(Message::Progress { stage, done, total }) => on_progress(stage, done, total),
                    Ok(final_message) => answer = Some(final_message),
                    Err(e) => {
                        let start: String = text.chars().take(120).collect();
                        unreadable = Some(format!("{e} in a line starting {start:?}"));
                    }
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
    let stderr_tail = stderr_tail.await.unwrap_or_default();
    Ok(match answer {
        Some(m) => Ended::Answer(m),
        None => Ended::Died(Death {
            status,
            stderr_tail,
            unreadable,
        }),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[tokio::test]
    async fn a_child_runs_with_an_empty_environment_and_every_limit_set() {
        let limits = Limits {
            memory_bytes: Some(512 << 20),
            wall_time: Duration::from_secs(60),
        };
        let script = "/bin/cat /proc/self/limits; /usr/bin/env";
        let out = confined(Path::new("/bin/sh"), &["-c", script], &limits)
            .output()
            .await
            .unwrap();
        let text = String::from_utf8(out.stdout).unwrap();
        let limit = |name: &str| -> String {
            let line = text.lines().find(|l| l.starts_with(name)).unwrap();
            line[name.len()..]
                .split_whitespace()
                .next()
                .unwrap()
                .to_string()
        };
        // Field names as Linux writes /proc/PID/limits (proc(5)).
        assert_eq!(limit("Max address space"), (512u64 << 20).to_string());
        assert_eq!(limit("Max cpu time"), limits.cpu_seconds().to_string());
        assert_eq!(limit("Max file size"), MAX_FILE_BYTES.to_string());
        assert_eq!(limit("Max processes"), MAX_PROCESSES.to_string());
        assert_eq!(limit("Max core file size"), "0");
        let env: Vec<&str> = text
            .lines()
            .filter(|l| !l.starts_with("Max ") && !l.starts_with("Limit"))
            .collect();
        assert!(env.contains(&"RUST_BACKTRACE=0"), "{env:?}");
        assert!(
            !env.iter()
                .any(|l| l.starts_with("HOME=") || l.starts_with("CARGO")),
            "{env:?}"
        );
    }

    #[tokio::test]
    async fn only_the_end_of_a_childs_stderr_is_kept() {
        let mut noise = vec![b'x'; 1 << 20];
        noise.extend_from_slice(b"the last words");
        let kept = tail(&noise[..]).await;
        assert_eq!(kept.len(), STDERR_TAIL);
        assert!(kept.ends_with("the last words"));
    }
}
