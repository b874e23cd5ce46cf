//! A real PostgreSQL for the tests: the cluster `.ci/run` started (its URL
//! in `PROCTOR_TEST_POSTGRES_URL`), or else one this helper starts with
//! `.ci/postgres` under `target/pg-test` and leaves running for the next
//! run. Each call makes a fresh, empty database.
#![allow(dead_code, unreachable_pub)]

use std::path::Path;
use std::process::Command;
use std::sync::OnceLock;

fn cluster() -> &'static str {
    static URL: OnceLock<String> = OnceLock::new();
    URL.get_or_init(|| {
        if let Ok(url) = std::env::var("PROCTOR_TEST_POSTGRES_URL") {
            return url;
        }
        let root = Path::new(env!("CARGO_MANIFEST_DIR"));
        let out = Command::new(root.join(".ci/postgres"))
            .arg("start")
            .arg(root.join("target/pg-test"))
            .output()
            .expect("running .ci/postgres");
        assert!(
            out.status.success(),
            "starting PostgreSQL failed (.ci/postgres start target/pg-test):\n{}",
            String::from_utf8_lossy(&out.stderr)
        );
        let url = String::from_utf8(out.stdout).unwrap().trim().to_string();
        // Databases an earlier run of the tests left on this cluster.
        let stale = query(
            &url,
            "SELECT datname FROM pg_database WHERE datname LIKE 'proctor_test_%'",
        );
        for name in stale.lines() {
            query(
                &url,
                &format!("DROP DATABASE IF EXISTS {name} WITH (FORCE)"),
            );
        }
        url
    })
}

/// The URL of a new database of its own on the test cluster.
pub fn fresh_database() -> String {
    let base = cluster();
    let name = format!("proctor_test_{}", uuid::Uuid::now_v7().simple());
    query(base, &format!("CREATE DATABASE {name}"));
    let (server, _) = base.rsplit_once('/').unwrap();
    format!("{server}/{name}")
}

/// Runs one SQL statement on a database and returns psql's unaligned output.
pub fn query(url: &str, sql: &str) -> String {
    let out = Command::new("psql")
        .arg(url)
        .args(["-v", "ON_ERROR_STOP=1", "-Atqc", sql])
        .output()
        .expect("running psql");
    assert!(
        out.status.success(),
        "{sql}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).unwrap().trim().to_string()
}
