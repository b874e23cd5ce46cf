//! HTTPS (api.md, "Access": `--tls-cert FILE --tls-key FILE`): the service
//! speaks TLS itself, and the command line trusts a private authority's
//! certificate with `--ca-cert`.

use std::process::Command;

use crate::harness::Server;

/// A self-signed certificate for this machine's loopback names, as PEM
/// (certificate, key), written into `dir`.
fn certificate(dir: &std::path::Path) -> (std::path::PathBuf, std::path::PathBuf, Vec<u8>) {
    let cert =
        rcgen::generate_simple_self_signed(vec!["localhost".into(), "127.0.0.1".into()]).unwrap();
    let pem = cert.cert.pem();
    let (c, k) = (dir.join("cert.pem"), dir.join("key.pem"));
    std::fs::write(&c, &pem).unwrap();
    std::fs::write(&k, cert.key_pair.serialize_pem()).unwrap();
    (c, k, pem.into_bytes())
}

#[tokio::test]
async fn the_service_speaks_https_and_the_client_trusts_a_named_certificate() {
    let dir = tempfile::tempdir().unwrap();
    let (cert, key, pem) = certificate(dir.path());
    let (cert, key) = (cert.to_str().unwrap(), key.to_str().unwrap());
    let mut s = Server::start(&["--tls-cert", cert, "--tls-key", key]);
    assert!(s.base.starts_with("https://"), "{}", s.base);
    s.trust(&pem);
    assert_eq!(s.get("/healthz").await.status, 200);

    let unknown = "0190a0a0-0000-7000-8000-000000000000";
    let report = |ca: Option<&str>| {
        let mut cmd = Command::new(env!("CARGO_BIN_EXE_proctor"));
        cmd.args(["report", unknown, "--server", &s.base]);
        if let Some(ca) = ca {
            cmd.args(["--ca-cert", ca]);
        }
        cmd.env_remove("PROCTOR_TOKEN").output().unwrap()
    };
    let trusted = report(Some(cert));
    let said = String::from_utf8_lossy(&trusted.stderr);
    assert_eq!(
        trusted.status.code(),
        Some(2),
        "the server answered 404: {said}"
    );
    assert!(said.contains("404"), "{said}");

    let untrusted = report(None);
    let said = String::from_utf8_lossy(&untrusted.stderr);
    assert_eq!(untrusted.status.code(), Some(3), "{said}");
    assert!(
        said.contains("certificate") && said.contains("--ca-cert"),
        "{said}"
    );
}

#[tokio::test]
async fn a_certificate_without_its_key_is_refused_at_start() {
    let dir = tempfile::tempdir().unwrap();
    let (cert, _, _) = certificate(dir.path());
    let out = Command::new(env!("CARGO_BIN_EXE_proctor"))
        .args(["serve", "--listen", "127.0.0.1:0", "--tls-cert"])
        .arg(&cert)
        .arg("--data-dir")
        .arg(dir.path().join("data"))
        .output()
        .unwrap();
    assert!(!out.status.success());
    let said = String::from_utf8_lossy(&out.stderr);
    assert!(said.contains("--tls-key"), "{said}");
}
