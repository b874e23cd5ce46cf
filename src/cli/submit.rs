//! `proctor submit`: the CI gate. Checks its arguments, uploads what the
//! server lacks, creates an evaluation, follows it, prints the ranked table
//! and writes the requested files. The exit code is the verdict.

use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};
use std::time::Instant;

use serde_json::Value;
use uuid::Uuid;

use super::client::{Client, Stored};
use super::connection::{ServerArgs, WaitArgs};
use super::exit::{EXIT_GO, Exit};
use super::follow::{conclude, wait};
use super::outputs::OutputArgs;
use crate::engine::gates::{GateName, Gates};
use crate::engine::logits::OutputKindChoice;
use crate::engine::settings::{OutputChoice, RankBy};
use crate::service::{BaselineChoice, EvaluationRequest};
use crate::store::{DatasetRecord, ModelRecord};

/// The exit codes of the commands that end with a verdict.
pub const EXIT_CODES: &str = "Exit codes: 0 go, 1 no-go, 2 usage or input error (a missing \
file, a gate the server refuses, an evaluation that failed on its input), 3 server or network \
error, or the time limit passed (the evaluation's id is printed).";

fn after_help() -> String {
    format!(
        "Gates (--gate NAME=VALUE, or a JSON object in --gates FILE): {}; and confidence=C to \
         judge gates at the cautious end of their interval.\n\n{EXIT_CODES}",
        GateName::all_names()
    )
}

#[derive(Debug, Clone, clap::Args)]
#[command(after_help = after_help())]
pub struct SubmitArgs {
    #[command(flatten)]
    pub server: ServerArgs,
    /// The teacher: an ONNX file, or the id of a stored model.
    #[arg(long, value_name = "FILE|ID")]
    pub teacher: String,
    /// A student (repeat for several): an ONNX file or a stored model's id.
    #[arg(long = "student", value_name = "FILE|ID", required = true)]
    pub students: Vec<String>,
    /// The evaluation set: an .npz or .npy file, or a stored set's id.
    #[arg(long, value_name = "FILE|ID")]
    pub data: String,
    /// The student in production to compare every candidate with: "current"
    /// (the project's baseline), a stored model's id, or an ONNX file.
    #[arg(long, value_name = "current|ID|FILE")]
    pub baseline: Option<String>,
    /// A JSON file holding an object of gates, e.g. {"min_agreement": 0.95}.
    #[arg(long, value_name = "FILE")]
    pub gates: Option<PathBuf>,
    /// One gate (repeatable), e.g. --gate max_p90_ms=5; overrides --gates.
    #[arg(long = "gate", value_name = "NAME=VALUE")]
    pub gate: Vec<String>,
    /// The distillation temperature T at which KL and soft cross-entropy are
    /// measured (default 4).
    #[arg(long)]
    pub temperature: Option<f64>,
    /// The weight of the soft term in the reported distillation loss, 0..1
    /// (default 0.5).
    #[arg(long)]
    pub alpha: Option<f64>,
    /// Orders candidates inside the gate groups: agreement, kl, top1,
    /// p50_ms or bytes (default agreement).
    #[arg(long)]
    pub rank_by: Option<String>,
    /// The project the evaluation belongs to (default "default").
    #[arg(long)]
    pub project: Option<String>,
    /// Samples per call in the bulk pass (1..4096, default 32).
    #[arg(long, value_name = "N")]
    pub batch_size: Option<u32>,
    /// Untimed runs of each model before the timed rounds (default 10).
    #[arg(long, value_name = "N")]
    pub warmup: Option<u32>,
    /// Timed rounds, each running every model once (default 100).
    #[arg(long, value_name = "N")]
    pub iterations: Option<u32>,
    /// Relative speed difference below which two models count as equally
    /// fast, 0..0.5 (default 0.03).
    #[arg(long, value_name = "FRACTION")]
    pub tolerance: Option<f64>,
    /// The output to score: NAME for every model, or MODEL=NAME (repeatable)
    /// with MODEL a file or id given above; by default each model's first
    /// float output that squeezes to [batch, classes].
    #[arg(long = "output", value_name = "NAME|MODEL=NAME")]
    pub output: Vec<String>,
    /// What the scored outputs hold: teacher=KIND and/or students=KIND, KIND
    /// one of auto, logits, probabilities (default auto).
    #[arg(long = "output-kind", value_name = "WHO=KIND")]
    pub output_kind: Vec<String>,
    /// The name an uploaded file is stored under: FILE=NAME (repeatable);
    /// by default the file's stem.
    #[arg(long = "name", value_name = "FILE=NAME")]
    pub names: Vec<String>,
    /// A tag (repeatable), e.g. --tag commit=3f9c2e1.
    #[arg(long = "tag", value_name = "KEY=VALUE")]
    pub tags: Vec<String>,
    /// Print the evaluation's id once it is queued and exit 0 without
    /// waiting: 0 then means queued, not go. `proctor wait ID` follows it to
    /// its verdict later.
    #[arg(long)]
    pub no_wait: bool,
    #[command(flatten)]
    pub wait: WaitArgs,
    #[command(flatten)]
    pub outputs: OutputArgs,
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

/// A word of a closed list, as the request spells it.
fn word<T: serde::de::DeserializeOwned>(text: &str, flag: &str, choices: &str) -> Result<T, Exit> {
    serde_json::from_value(Value::String(text.to_string()))
        .map_err(|_| input(format!("{flag} must be {choices}, not '{text}'")))
}

fn apply_output_kinds(args: &SubmitArgs, body: &mut EvaluationRequest) -> Result<(), Exit> {
    for given in &args.output_kind {
        let (who, kind) = pair(given, "--output-kind")?;
        let kind: OutputKindChoice = word(&kind, "--output-kind", "auto, logits or probabilities")?;
        match who.as_str() {
            "teacher" => body.output_kind.teacher = kind,
            "students" => body.output_kind.students = kind,
            _ => {
                return Err(input(format!(
                    "--output-kind takes teacher=KIND or students=KIND, not '{given}'"
                )));
            }
        }
    }
    Ok(())
}

/// Everything of the request that the arguments alone decide, checked
/// before any file is read.
fn settings_of(args: &SubmitArgs) -> Result<EvaluationRequest, Exit> {
    let nil = Uuid::nil();
    let mut body = EvaluationRequest::new(nil, vec![], nil);
    body.gates = gates(args)?;
    if let Some(r) = &args.rank_by {
        body.rank_by = word::<RankBy>(r, "--rank-by", "agreement, kl, top1, p50_ms or bytes")?;
    }
    for t in &args.tags {
        let (k, v) = pair(t, "--tag")?;
        body.tags.insert(k, v);
    }
    body.temperature = args.temperature;
    body.alpha = args.alpha;
    body.batch_size = args.batch_size;
    if let Some(w) = args.warmup {
        body.latency.warmup = w;
    }
    if let Some(i) = args.iterations {
        body.latency.iterations = i;
    }
    if let Some(t) = args.tolerance {
        body.latency.tolerance = t;
    }
    apply_output_kinds(args, &mut body)?;
    if let Some(p) = &args.project {
        body.project = p.clone();
    }
    Ok(body)
}

/// `--output`: one name for all, or names per model as given on the
/// command line (resolved to ids once the files are uploaded).
enum Outputs {
    Default,
    Every(String),
    PerModel(HashMap<String, String>),
}

fn outputs(args: &SubmitArgs) -> Result<Outputs, Exit> {
    match args.output.as_slice() {
        [] => Ok(Outputs::Default),
        [one] if !one.contains('=') => Ok(Outputs::Every(one.clone())),
        many => many
            .iter()
            .map(|o| pair(o, "--output"))
            .collect::<Result<HashMap<_, _>, _>>()
            .map(Outputs::PerModel),
    }
}

/// A file is uploaded under its name (unless the server has it); anything
/// else must be an id.
async fn resolve<T: Stored>(
    client: &Client,
    given: &str,
    names: &HashMap<String, String>,
) -> Result<Uuid, Exit> {
    let path = Path::new(given);
    if path.is_file() {
        let stem = path
            .file_stem()
            .map_or("upload".into(), |s| s.to_string_lossy().into_owned());
        let name = names.get(given).cloned().unwrap_or(stem);
        let (id, uploaded) = client.ensure::<T>(path, &name).await?;
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

/// The whole submission; returns the exit code.
pub async fn run(args: &SubmitArgs) -> Result<i32, Exit> {
    let mut body = settings_of(args)?;
    let wanted_outputs = outputs(args)?;
    let names: HashMap<String, String> = args
        .names
        .iter()
        .map(|n| pair(n, "--name"))
        .collect::<Result<_, _>>()?;
    let deadline = args.wait.timeout.map(|t| Instant::now() + t);
    let client = Client::new(&args.server, args.wait.timeout)?;
    let mut ids: HashMap<&str, Uuid> = HashMap::new();
    body.teacher = resolve::<ModelRecord>(&client, &args.teacher, &names).await?;
    ids.insert(&args.teacher, body.teacher);
    for s in &args.students {
        let id = resolve::<ModelRecord>(&client, s, &names).await?;
        ids.insert(s, id);
        body.students.push(id);
    }
    body.dataset = resolve::<DatasetRecord>(&client, &args.data, &names).await?;
    body.baseline = match args.baseline.as_deref() {
        None => None,
        Some("current") => Some(BaselineChoice::Current),
        Some(given) => {
            let id = resolve::<ModelRecord>(&client, given, &names).await?;
            ids.insert(given, id);
            Some(BaselineChoice::Model(id))
        }
    };
    body.output = match wanted_outputs {
        Outputs::Default => None,
        Outputs::Every(name) => Some(OutputChoice::Every(name)),
        Outputs::PerModel(map) => {
            let mut by_id = BTreeMap::new();
            for (model, name) in map {
                let id = ids.get(model.as_str()).copied().ok_or_else(|| {
                    input(format!(
                        "--output {model}=...: '{model}' is not a --teacher, --student or \
                         --baseline given above"
                    ))
                })?;
                by_id.insert(id, name);
            }
            Some(OutputChoice::PerModel(by_id))
        }
    };
    let created = client.create_evaluation(&body).await?;
    let id = created.id;
    if args.no_wait {
        eprintln!("evaluation {id} queued; exit 0 here means queued, not go");
        println!("{id}");
        return Ok(EXIT_GO);
    }
    eprintln!("evaluation {id} queued");
    let done = wait(&client, id, deadline).await?;
    conclude(&client, &done, &args.outputs, args.server.base()).await
}
