//! `proctor demo`: the main job on its embedded default. Starts the service
//! on loopback, submits the bundled (synthetic) turbine-acoustics teacher,
//! students and evaluation set through the service's own HTTP API, prints
//! the ranked table and the dashboard's address.

use std::net::SocketAddr;
use std::path::PathBuf;

use anyhow::Context;

use clap::Parser;

use super::submit::{self, SubmitArgs};

/// `submit`'s flags, parsed as the command line would parse them.
#[derive(Parser)]
struct SubmitCommand {
    #[command(flatten)]
    args: SubmitArgs,
}
use crate::config::ServeArgs;
use crate::server;

/// The bundled files (see demo/README.md): name and bytes.
const FILES: &[(&str, &[u8])] = &[
    ("teacher.onnx", include_bytes!("../../demo/teacher.onnx")),
    (
        "student_distilled_64.onnx",
        include_bytes!("../../demo/student_distilled_64.onnx"),
    ),
    (
        "student_distilled_32.onnx",
        include_bytes!("../../demo/student_distilled_32.onnx"),
    ),
    (
        "student_hard_64.onnx",
        include_bytes!("../../demo/student_hard_64.onnx"),
    ),
    (
        "student_tiny_16.onnx",
        include_bytes!("../../demo/student_tiny_16.onnx"),
    ),
    ("frames.npz", include_bytes!("../../demo/frames.npz")),
];

/// The gates the demo team sets for replacing its teacher.
const GATES: &[&str] = &[
    "min_agreement=0.9",
    "max_size_ratio=0.5",
    "max_negative_flip_rate=0.05",
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
    let serve = ServeArgs {
        listen: args.listen,
        data_dir: data_dir.clone(),
        database_url: None,
        max_upload_bytes: 2 << 30,
        workers: 1,
        eval_timeout: 3600,
        eval_memory: 4096,
        bulk_threads: 0,
        check_slots: 2,
        check_waiting: 16,
    };
    let running = server::start(&serve).await?;
    let base = format!("http://{}", running.addr);
    eprintln!(
        "proctor demo: service on {base}, data in {}",
        data_dir.display()
    );
    let path = |name: &str| files.join(name).to_string_lossy().into_owned();
    // The demo submits with the flags a team's CI step would pass.
    let mut argv: Vec<String> = ["submit", "--server", &base, "--teacher", &path("teacher.onnx")]
        .map(String::from)
        .to_vec();
    for (name, _) in &FILES[1..5] {
        argv.extend(["--student".into(), path(name)]);
    }
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
    println!("dashboard: {base}/");
    if args.exit {
        running.stop().await?;
    } else {
        eprintln!("serving until Ctrl-C");
        running.until_signal().await?;
    }
    Ok(code)
}
