//! `proctor submit`: the CI gate. Uploads what the server lacks, creates an
//! evaluation, waits for it, prints the ranked table and writes the
//! requested files. The exit code is the verdict.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::time::Duration;

use serde_json::{Map, Value, json};

use super::client::{Client, ClientError, Upload};
use super::{junit, render};
use crate::report::{Report, Verdict};

/// Exit codes, documented in `--help` and the README.
pub const EXIT_GO: i32 = 0;
pub const EXIT_NO_GO: i32 = 1;
pub const EXIT_INPUT: i32 = 2;
pub const EXIT_SERVER: i32 = 3;

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

/// A failure with the exit code it maps to.
pub struct Exit {
    pub code: i32,
    pub message: String,
}

impl From<ClientError> for Exit {
    fn from(e: ClientError) -> Self {
        let code = match e {
            ClientError::Input(_) => EXIT_INPUT,
            ClientError::Server(_) => EXIT_SERVER,
        };
        Exit {
            code,
            message: e.to_string(),
        }
    }
}

fn input(message: impl Into<String>) -> Exit {
    Exit {
        code: EXIT_INPUT,
        message: message.into(),
    }
}

fn pair(s: &str, what: &str) -> Result<(String, String), Exit> {
    s.split_once('=')
        .map(|(k, v)| (k.trim().to_string(), v.trim().to_string()))
        .filter(|(k, _)| !k.is_empty())
        .ok_or_else(|| input(format!("{what} '{s}' must be NAME=VALUE")))
}

/// The gates object: the file's, then each --gate over it.
fn gates(args: &SubmitArgs) -> Result<Map<String, Value>, Exit> {
    let mut gates = match &args.gates {
        None => Map::new(),
        Some(path) => {
            let text = std::fs::read_to_string(path)
                .map_err(|e| input(format!("cannot read {}: {e}", path.display())))?;
            match serde_json::from_str::<Value>(&text) {
                Ok(Value::Object(m)) => m,
                _ => {
                    return Err(input(format!(
                        "{} must hold a JSON object of gates",
                        path.display()
                    )));
                }
            }
        }
    };
    for g in &args.gate {
        let (name, value) = pair(g, "--gate")?;
        let v: f64 = value
            .parse()
            .map_err(|_| input(format!("--gate {name} needs a number, not '{value}'")))?;
        gates.insert(name, json!(v));
    }
    Ok(gates)
}

/// A file is uploaded (unless the server has it); anything else must be an id.
async fn resolve(client: &Client, kind: Upload, given: &str) -> Result<String, Exit> {
    let path = Path::new(given);
    if path.is_file() {
        let (id, uploaded) = client.ensure(kind, path).await?;
        let how = if uploaded {
            "uploaded"
        } else {
            "already stored"
        };
        eprintln!("{given}: {how} as {id}");
        return Ok(id);
    }
    if uuid::Uuid::parse_str(given).is_ok() {
        return Ok(given.to_string());
    }
    Err(input(format!(
        "'{given}' is neither a file nor a stored id"
    )))
}

/// The request body from the arguments (ids already resolved).
pub fn request_body(
    args: &SubmitArgs,
    teacher: String,
    students: Vec<String>,
    data: String,
) -> Result<Value, Exit> {
    let mut body =
        json!({"teacher": teacher, "students": students, "dataset": data, "gates": gates(args)?});
    let mut tags = Map::new();
    for t in &args.tags {
        let (k, v) = pair(t, "--tag")?;
        tags.insert(k, json!(v));
    }
    body["tags"] = Value::Object(tags);
    if let Some(t) = args.temperature {
        body["temperature"] = json!(t);
    }
    if let Some(a) = args.alpha {
        body["alpha"] = json!(a);
    }
    if let Some(r) = &args.rank_by {
        body["rank_by"] = json!(r);
    }
    if let Some(p) = &args.project {
        body["project"] = json!(p);
    }
    Ok(body)
}

/// Waits for the evaluation to finish, drawing its progress on stderr.
pub async fn wait(client: &Client, id: &str) -> Result<Value, Exit> {
    let live = std::io::stderr().is_terminal();
    let mut last_line = String::new();
    loop {
        let e = client.evaluation(id).await?;
        let status = e["status"].as_str().unwrap_or("?").to_string();
        let stage = e["progress"]["stage"].as_str().unwrap_or("waiting");
        let (done, total) = (
            e["progress"]["done"].as_u64().unwrap_or(0),
            e["progress"]["total"].as_u64().unwrap_or(0),
        );
        let pct = (100 * done).checked_div(total).unwrap_or(0);
        let line = if live {
            let filled = (pct / 5) as usize;
            format!(
                "{status:>9} {stage:<8} [{}{}] {done}/{total}",
                "#".repeat(filled),
                ".".repeat(20 - filled)
            )
        } else {
            // Plain lines: one per stage and per tenth of it.
            format!("{status} {stage} {}%", pct / 10 * 10)
        };
        if line != last_line {
            if live {
                eprint!("\r{line}\x1b[K");
            } else {
                eprintln!("{line}");
            }
            last_line = line;
        }
        if matches!(status.as_str(), "succeeded" | "failed" | "canceled") {
            if live {
                eprintln!();
            }
            return Ok(e);
        }
        tokio::time::sleep(Duration::from_millis(if live { 200 } else { 500 })).await;
    }
}

/// Prints the table and writes the requested files.
pub fn publish(args: &SubmitArgs, report: &Report, raw: &Value) -> Result<(), Exit> {
    print!("{}", render::table(report));
    let write = |path: &Path, text: String| {
        std::fs::write(path, text)
            .map_err(|e| input(format!("cannot write {}: {e}", path.display())))
    };
    if let Some(p) = &args.json {
        write(p, serde_json::to_string_pretty(raw).unwrap_or_default())?;
    }
    if let Some(p) = &args.junit {
        write(p, junit::junit(report))?;
    }
    if let Some(p) = &args.summary {
        let link = format!(
            "{}/v1/evaluations/{}/report",
            args.server.trim_end_matches('/'),
            report.evaluation
        );
        write(p, render::markdown(report, Some(&link)))?;
    }
    Ok(())
}

/// The whole submission; returns the exit code.
pub async fn run(args: &SubmitArgs) -> Result<i32, Exit> {
    let client = Client::new(&args.server);
    let teacher = resolve(&client, Upload::Model, &args.teacher).await?;
    let mut students = Vec::with_capacity(args.students.len());
    for s in &args.students {
        students.push(resolve(&client, Upload::Model, s).await?);
    }
    let data = resolve(&client, Upload::Dataset, &args.data).await?;
    let body = request_body(args, teacher, students, data)?;
    let created = client.create_evaluation(&body).await?;
    let id = created["id"].as_str().ok_or_else(|| Exit {
        code: EXIT_SERVER,
        message: "no id in the answer".into(),
    })?;
    if args.no_wait {
        println!("{id}");
        return Ok(EXIT_GO);
    }
    eprintln!("evaluation {id} queued");
    let done = wait(&client, id).await?;
    match done["status"].as_str() {
        Some("succeeded") => {}
        Some("failed") => {
            let status = done["error"]["status"].as_u64().unwrap_or(500);
            let detail = done["error"]["detail"].as_str().unwrap_or("no detail");
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
                message: format!("the evaluation ended {}", other.unwrap_or("?")),
            });
        }
    }
    let raw = client.get(&format!("/v1/evaluations/{id}/report")).await?;
    let report: Report = serde_json::from_value(raw.clone()).map_err(|e| Exit {
        code: EXIT_SERVER,
        message: format!("the report does not parse: {e}"),
    })?;
    publish(args, &report, &raw)?;
    Ok(match report.verdict {
        Verdict::Go => EXIT_GO,
        Verdict::NoGo => EXIT_NO_GO,
    })
}
