//! Service benchmark on loopback: prints figures, asserts nothing. Run with
//! `cargo bench --bench service`. Bounded: a fixed number of requests, then
//! it stops by itself.
//!
//! 1. p50/p99 of `GET /v1/evaluations` with 10,000 stored evaluations at 32
//!    concurrent connections.
//! 2. A 500 MB upload's throughput against a plain file copy, and the
//!    server's peak RSS during it above its idle RSS.

use std::io::{BufRead, BufReader, Write};
use std::path::Path;
use std::process::{Command, Stdio};
use std::sync::Arc;
use std::time::Instant;

use proctor::store::{AppliedRequest, NewEvaluation, Store};

const EVALUATIONS: usize = 10_000;
const CONNECTIONS: usize = 32;
const REQUESTS: usize = 6_400;

fn status_kib(pid: u32, key: &str) -> u64 {
    std::fs::read_to_string(format!("/proc/{pid}/status"))
        .unwrap_or_default()
        .lines()
        .find_map(|l| l.strip_prefix(key))
        .and_then(|v| v.trim().trim_end_matches("kB").trim().parse().ok())
        .unwrap_or(0)
}

fn write_npy(path: &Path, bytes: usize) {
    let rows = bytes / (64 * 4);
    let mut f = std::io::BufWriter::new(std::fs::File::create(path).unwrap());
    f.write_all(&proctor::engine::npy::header_bytes("<f4", &[rows, 64]))
        .unwrap();
    let chunk: Vec<u8> = (0..(1 << 20))
        .map(|i: u32| (i.wrapping_mul(2654435761) >> 13) as u8)
        .collect();
    let mut left = rows * 256;
    while left > 0 {
        let n = left.min(chunk.len());
        f.write_all(&chunk[..n]).unwrap();
        left -= n;
    }
}

#[tokio::main]
async fn main() {
    let dir = tempfile::tempdir().unwrap();
    let mut server = Command::new(env!("CARGO_BIN_EXE_proctor"))
        .args(["serve", "--listen", "127.0.0.1:0", "--data-dir"])
        .arg(dir.path())
        .env("RUST_LOG", "warn")
        .stdout(Stdio::piped())
        .spawn()
        .unwrap();
    let mut line = String::new();
    BufReader::new(server.stdout.take().unwrap())
        .read_line(&mut line)
        .unwrap();
    let base = line
        .trim()
        .strip_prefix("proctor listening on ")
        .unwrap()
        .to_string();
    let client = reqwest::Client::builder()
        .pool_max_idle_per_host(CONNECTIONS)
        .build()
        .unwrap();
    let cases = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/cases/mlp");
    let upload = |file: &str, kind: &str| {
        let client = client.clone();
        let (base, bytes) = (base.clone(), std::fs::read(cases.join(file)).unwrap());
        let kind = kind.to_string();
        async move {
            let v: serde_json::Value = client
                .post(format!("{base}/v1/{kind}?name=bench"))
                .body(bytes)
                .send()
                .await
                .unwrap()
                .json()
                .await
                .unwrap();
            uuid::Uuid::parse_str(v["id"].as_str().unwrap()).unwrap()
        }
    };
    let teacher = upload("teacher.onnx", "models").await;
    let set = upload("data.npz", "datasets").await;

    // Seed rows straight into the same database (WAL lets both write).
    let url = format!("sqlite://{}", dir.path().join("proctor.db").display());
    let seed_blobs = dir.path().join("seed-blobs");
    let store = Store::open(&url, &seed_blobs.display().to_string(), &seed_blobs)
        .await
        .unwrap();
    let started = Instant::now();
    for i in 0..EVALUATIONS {
        let id = uuid::Uuid::now_v7();
        let new = NewEvaluation {
            id,
            request: AppliedRequest {
                project: format!("project-{}", i % 7),
                teacher,
                students: vec![teacher],
                dataset: set,
                baseline: None,
                settings: proctor::engine::settings::Settings::default(),
                tags: Default::default(),
            },
            created_at: time::OffsetDateTime::now_utc(),
            created_by: None,
        };
        store.create_evaluation(&new).await.unwrap().unwrap();
        // Mark them finished so no worker picks them up.
        store.cancel(id, None).await.unwrap();
    }
    println!(
        "seeded {EVALUATIONS} evaluations in {:.1} s",
        started.elapsed().as_secs_f64()
    );

    let url = Arc::new(format!("{base}/v1/evaluations"));
    let started = Instant::now();
    let mut tasks = Vec::new();
    for _ in 0..CONNECTIONS {
        let (client, url) = (client.clone(), url.clone());
        tasks.push(tokio::spawn(async move {
            let mut times = Vec::with_capacity(REQUESTS / CONNECTIONS);
            for _ in 0..REQUESTS / CONNECTIONS {
                let t = Instant::now();
                let res = client.get(url.as_str()).send().await.unwrap();
                assert!(res.status().is_success());
                res.bytes().await.unwrap();
                times.push(t.elapsed().as_secs_f64() * 1e3);
            }
            times
        }));
    }
    let mut all = Vec::new();
    for t in tasks {
        all.extend(t.await.unwrap());
    }
    let wall = started.elapsed().as_secs_f64();
    all.sort_by(f64::total_cmp);
    let pick = |q: f64| all[((q * all.len() as f64).ceil() as usize).max(1) - 1];
    println!(
        "GET /v1/evaluations (page of 50, {EVALUATIONS} stored), {CONNECTIONS} connections, {} requests: \
         p50 {:.2} ms, p99 {:.2} ms, {:.0} requests/s",
        all.len(),
        pick(0.50),
        pick(0.99),
        all.len() as f64 / wall
    );

    // 500 MB upload against a plain copy of the same file.
    let big = dir.path().join("big.npy");
    write_npy(&big, 500_000_000);
    let size = std::fs::metadata(&big).unwrap().len();
    let copy = dir.path().join("copy.npy");
    let t = Instant::now();
    std::fs::copy(&big, &copy).unwrap();
    let cp_s = t.elapsed().as_secs_f64();
    std::fs::remove_file(&copy).unwrap();
    let pid = server.id();
    // Reset the peak so that it measures this upload alone (Linux clear_refs).
    let _ = std::fs::write(format!("/proc/{pid}/clear_refs"), "5");
    let idle = status_kib(pid, "VmRSS:");
    let file = tokio::fs::File::open(&big).await.unwrap();
    let t = Instant::now();
    let res = client
        .post(format!("{base}/v1/datasets?name=big"))
        .header("content-length", size)
        .body(reqwest::Body::wrap_stream(
            tokio_util::io::ReaderStream::new(file),
        ))
        .send()
        .await
        .unwrap();
    let status = res.status();
    res.bytes().await.unwrap();
    let up_s = t.elapsed().as_secs_f64();
    let peak = status_kib(pid, "VmHWM:");
    println!(
        "upload of {:.0} MB: {status} in {up_s:.2} s = {:.0} MB/s; plain copy {cp_s:.2} s = {:.0} MB/s; \
         ratio {:.2}x; server RSS idle {} MiB, peak {} MiB (+{} MiB)",
        size as f64 / 1e6,
        size as f64 / 1e6 / up_s,
        size as f64 / 1e6 / cp_s,
        cp_s / up_s,
        idle / 1024,
        peak / 1024,
        peak.saturating_sub(idle) / 1024
    );
    let _ = server.kill();
    let _ = server.wait();
}
