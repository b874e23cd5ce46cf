//! Slow and stalled clients: headers that never end, uploads that stop
//! sending, more uploads than the service takes at once, and a shutdown
//! that such clients cannot hold up.

use std::time::{Duration, Instant};

use tokio::io::{AsyncReadExt, AsyncWriteExt};
use tokio::net::TcpStream;

use crate::harness::Server;
use crate::support::case_dir;

async fn connect(s: &Server) -> TcpStream {
    TcpStream::connect(s.base.trim_start_matches("http://"))
        .await
        .unwrap()
}

/// Starts a chunked model upload, sends one chunk, and leaves it open.
async fn stalled_upload(s: &Server) -> TcpStream {
    let mut tcp = connect(s).await;
    tcp.write_all(
        b"POST /v1/models?name=stalled HTTP/1.1\r\nHost: localhost\r\n\
          content-type: application/octet-stream\r\ntransfer-encoding: chunked\r\n\r\n\
          10\r\n0123456789abcdef\r\n",
    )
    .await
    .unwrap();
    tcp
}

/// The status line of the answer on `tcp`, or None when it closed without one.
async fn status_of(tcp: &mut TcpStream, limit: Duration) -> Option<u16> {
    let mut buf = vec![0u8; 4096];
    let n = tokio::time::timeout(limit, tcp.read(&mut buf))
        .await
        .expect("an answer or a close within the limit")
        .unwrap_or(0);
    let text = String::from_utf8_lossy(&buf[..n]);
    text.strip_prefix("HTTP/1.1 ")?.get(..3)?.parse().ok()
}

#[tokio::test]
async fn a_connection_whose_headers_never_end_is_closed() {
    let s = Server::start(&[]);
    let mut tcp = connect(&s).await;
    tcp.write_all(b"GET /v1/models HTTP/1.1\r\nHost: localhost\r\n")
        .await
        .unwrap();
    // The header-read timeout is 10 s; the limit only keeps a broken
    // service from hanging the test.
    let answer = status_of(&mut tcp, Duration::from_secs(60)).await;
    assert!(matches!(answer, None | Some(408)), "{answer:?}");
}

#[tokio::test]
async fn uploads_past_the_cap_are_503_and_stalled_ones_are_dropped_with_408_leaving_nothing() {
    let s = Server::start(&["--max-uploads", "4", "--upload-idle-timeout", "2"]);
    let before = s.threads();
    let mut stalled = Vec::new();
    for _ in 0..4 {
        stalled.push(stalled_upload(&s).await);
    }
    tokio::time::sleep(Duration::from_millis(300)).await;
    let mut extra = stalled_upload(&s).await;
    assert_eq!(
        status_of(&mut extra, Duration::from_secs(30)).await,
        Some(503)
    );
    let files = std::fs::read_dir(s.data_dir().join("incoming"))
        .unwrap()
        .count();
    assert!(files <= 4, "{files} temporary files for 4 uploads");
    // One writer thread per admitted upload, plus the runtime's own
    // short-lived file-system threads; never one per stalled client.
    let threads = s.threads();
    assert!(
        threads <= before + 16,
        "threads went from {before} to {threads}"
    );
    for tcp in &mut stalled {
        assert_eq!(status_of(tcp, Duration::from_secs(30)).await, Some(408));
    }
    let files = std::fs::read_dir(s.data_dir().join("incoming"))
        .unwrap()
        .count();
    assert_eq!(files, 0);
    let a = s
        .upload_model(&case_dir("mlp").join("teacher.onnx"), "teacher")
        .await;
    assert_eq!(a.status, 201, "a normal upload goes through: {}", a.body);
}

#[tokio::test]
async fn sigterm_ends_the_service_within_its_deadline_despite_a_stalled_upload() {
    let mut s = Server::start(&[]);
    let _stalled = stalled_upload(&s).await;
    tokio::time::sleep(Duration::from_millis(300)).await;
    let asked = Instant::now();
    assert!(s.terminate().success());
    // The shutdown deadline is 10 s; the upload's own idle limit (30 s)
    // would be the end without it.
    assert!(
        asked.elapsed() < Duration::from_secs(25),
        "{:?}",
        asked.elapsed()
    );
}
