//! `proctor demo`: the main job on its embedded default. Starts the service
//! on loopback, submits the bundled (synthetic) turbine-acoustics teacher,
//! students, production baseline and evaluation set through the service's
//! own HTTP API, prints the ranked table and the dashboard's address.

use std::net::SocketAddr;
use std::path::PathBuf;

use anyhow::Context;
use clap::Parser;

use super::submit::{self, SubmitArgs};
use crate::config::ServeArgs;
use crate::server;

/// `submit`'s flags, parsed as the command line would parse them.
#[derive(Parser)]
struct SubmitCommand {
    #[command(flatten)]
    args: SubmitArgs,
}

/// The bundled files (see demo/README.md): name and bytes.
const FILES: &[(&str, &[u8])] = &[
    ("teacher.onnx", include_bytes!("../../demo/teacher.onnx")),
    (
        "student_production.onnx",
        include_bytes!("../../demo/student_production.onnx"),
    ),
    (
        "student_distilled_64.onnx",
        include_bytes!("../../demo/student_distilled_64.onnx"),
    ),
    (
        "student_hard_64.onnx",
        include_bytes!("../../demo/student_hard_64.onnx"),
    ),
    (
        "student_tiny_16.onnx",
        include_bytes!("../../demo/student_tiny_16.onnx"),
    ),
    (
        "student_wide_96.onnx",
        include_bytes!("../../demo/student_wide_96.onnx"),
    ),
    ("frames.npz", include_bytes!("../../demo/frames.npz")),
];

/// The model the demo team runs in production today: the evaluation's
/// baseline, which every candidate is compared with.
const BASELINE: &str = "student_production.onnx";

/// The candidates the team's CI step submits.
const CANDIDATES: &[&str] = &[
    "student_distilled_64.onnx",
    "student_hard_64.onnx",
    "student_tiny_16.onnx",
    "student_wide_96.onnx",
];

/// The gates the demo team sets for replacing the production student: close
/// to the teacher overall and at every microphone position, small, clearly
/// faster than the teacher, and no worse than what runs today.
const GATES: &[&str] = &[
    "min_agreement=0.9",
    "min_slice_agreement=0.8",
    "max_size_ratio=0.5",
    "min_speedup=2",
    "min_baseline_agreement_delta=0",
];

#[derive(Debug, Clone, clap::Args)]
pub struct DemoArgs {
    /// Keep the demo's data here instead of a fresh temporary folder.
    #[arg(long)]
    pub data_dir: Option<PathBuf>,
    /// Address for the service (port 0 picks a free one).
    #[arg(long, default_value = "127.0.0.1:0")]
    pub listen: SocketAddr,
    /// Print the results and stop instead of serving the dashboard.
    #[arg(long)]
    pub exit: bool,
}

pub async fn run(args: &DemoArgs) -> anyhow::Result<i32> {
    let scratch = tempfile::tempdir().context("creating a data dir")?;
    let data_dir = args
        .data_dir
        .clone()
        .unwrap_or_else(|| scratch.path().to_owned());
    let files = data_dir.join("demo-files");
    std::fs::create_dir_all(&files)?;
    for (name, bytes) in FILES {
        std::fs::write(files.join(name), bytes)?;
    }
    let serve = ServeArgs::with_defaults(&[
        "--listen".as_ref(),
        args.listen.to_string().as_ref(),
        "--data-dir".as_ref(),
        data_dir.as_os_str(),
    ])?;
    let running = server::start(&serve).await?;
    let base = format!("http://{}", running.addr);
    eprintln!(
        "proctor demo: service on {base}, data in {}",
        data_dir.display()
    );
    let path = |name: &str| files.join(name).to_string_lossy().into_owned();
    // The demo submits with the flags a team's CI step would pass.
    let mut argv: Vec<String> = [
        "submit",
        "--server",
        &base,
        "--teacher",
        &path("teacher.onnx"),
    ]
    .map(String::from)
    .to_vec();
    for name in CANDIDATES {
        argv.extend(["--student".into(), path(name)]);
    }
    argv.extend(["--baseline".into(), path(BASELINE)]);
    argv.extend(["--data".into(), path("frames.npz")]);
    for g in GATES {
        argv.extend(["--gate".into(), g.to_string()]);
    }
    argv.extend(
        [
            "--temperature",
            "4",
            "--alpha",
            "0.9",
            "--project",
            "turbine-acoustics",
            "--tag",
            "source=demo",
        ]
        .map(String::from),
    );
    let submit = SubmitCommand::try_parse_from(argv)
        .expect("the demo's own flags parse")
        .args;
    let code = match submit::run(&submit).await {
        Ok(_) => 0,
        Err(e) => {
            eprintln!("proctor demo: {}", e.message);
            e.code
        }
    };
    if args.exit {
        running.stop().await?;
        // The address is dead by now, so say where the results went instead.
        match &args.data_dir {
            Some(dir) => println!(
                "service stopped; the evaluation is kept in {} \
                 (`proctor serve --data-dir {}` shows it again)",
                dir.display(),
                dir.display()
            ),
            None => println!(
                "service stopped and its temporary data dir removed \
                 (pass --data-dir DIR to keep the evaluation)"
            ),
        }
    } else {
        println!("dashboard: {base}/");
        eprintln!("serving until Ctrl-C");
        running.until_signal().await?;
    }
    Ok(code)
}
