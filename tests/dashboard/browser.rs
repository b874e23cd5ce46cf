//! Headless Chromium through chromedriver, with the few actions the tests use.

use std::io::{BufRead, BufReader};
use std::os::unix::process::CommandExt;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use fantoccini::elements::Element;
use fantoccini::wd::WebDriverCompatibleCommand;
use fantoccini::{Client, ClientBuilder, Locator};
use serde_json::{Value, json};

pub struct Browser {
    client: Client,
    /// chromedriver, leading its own process group, which holds the browser.
    driver: Child,
    /// The browser's profile, removed with the browser.
    _profile: tempfile::TempDir,
}

/// An element's box on the page, in CSS pixels.
#[derive(Debug, Clone, Copy)]
pub struct Rect {
    pub left: f64,
    pub right: f64,
    pub top: f64,
    pub bottom: f64,
}

/// Elements found by CSS, with their attributes and text.
pub struct Found(Element);

impl Found {
    pub async fn attr(&self, name: &str) -> Option<String> {
        self.0.attr(name).await.unwrap()
    }
}

/// chromedriver's log endpoint (Selenium's), for the browser console.
#[derive(Debug)]
struct BrowserLog;

impl WebDriverCompatibleCommand for BrowserLog {
    fn endpoint(
        &self,
        base: &url::Url,
        session: Option<&str>,
    ) -> Result<url::Url, url::ParseError> {
        base.join(&format!("session/{}/se/log", session.unwrap_or_default()))
    }

    fn method_and_body(&self, _: &url::Url) -> (http::Method, Option<String>) {
        (
            http::Method::POST,
            Some(json!({"type": "browser"}).to_string()),
        )
    }
}

/// A Chrome DevTools command through chromedriver (`goog/cdp/execute`):
/// the viewport is set this way, since a headless window will not grow
/// taller than its screen.
#[derive(Debug)]
struct Cdp {
    cmd: &'static str,
    params: Value,
}

impl WebDriverCompatibleCommand for Cdp {
    fn endpoint(
        &self,
        base: &url::Url,
        session: Option<&str>,
    ) -> Result<url::Url, url::ParseError> {
        base.join(&format!(
            "session/{}/goog/cdp/execute",
            session.unwrap_or_default()
        ))
    }

    fn method_and_body(&self, _: &url::Url) -> (http::Method, Option<String>) {
        (
            http::Method::POST,
            Some(json!({"cmd": self.cmd, "params": self.params}).to_string()),
        )
    }
}

/// Starts chromedriver on a port the kernel picks, and reads which from the
/// line it prints once it listens.
fn start_driver() -> (Child, u16) {
    let mut driver = Command::new("chromedriver")
        .arg("--port=0")
        .process_group(0)
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .expect("chromedriver is needed: apt-get install chromium chromium-driver");
    let stdout = driver.stdout.take().unwrap();
    let mut lines = BufReader::new(stdout).lines();
    let port = loop {
        let line = lines
            .next()
            .expect("chromedriver ended before it listened")
            .unwrap();
        if let Some(rest) = line.split("started successfully on port ").nth(1) {
            break rest.trim_end_matches('.').trim().parse().unwrap();
        }
    };
    // The rest of its output is drained so that it never blocks on a full pipe.
    std::thread::spawn(move || lines.for_each(drop));
    (driver, port)
}

impl Browser {
    pub async fn start() -> Browser {
        let (driver, port) = start_driver();
        let profile = tempfile::tempdir().unwrap();
        let caps = json!({
            "goog:chromeOptions": {
                "binary": "/usr/bin/chromium",
                "args": ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                         "--disable-background-networking", "--disable-component-update", "--disable-sync",
                         "--disable-dev-shm-usage", "--window-size=1280,1600",
                         format!("--user-data-dir={}", profile.path().display())],
            },
            "goog:loggingPrefs": {"browser": "ALL"},
        });
        let mut builder =
            ClientBuilder::new(hyper_util::client::legacy::connect::HttpConnector::new());
        builder.capabilities(caps.as_object().unwrap().clone());
        let start = Instant::now();
        let client = loop {
            match builder.connect(&format!("http://127.0.0.1:{port}")).await {
                Ok(c) => break c,
                Err(e) if start.elapsed() < Duration::from_secs(20) => {
                    let _ = e;
                    tokio::time::sleep(Duration::from_millis(200)).await;
                }
                Err(e) => panic!("cannot start a browser session: {e}"),
            }
        };
        Browser {
            client,
            driver,
            _profile: profile,
        }
    }

    pub async fn open(&self, url: &str) {
        self.client.goto(url).await.unwrap();
    }

    pub async fn title(&self) -> String {
        self.client.title().await.unwrap()
    }

    pub async fn all(&self, css: &str) -> Vec<Found> {
        self.client
            .find_all(Locator::Css(css))
            .await
            .unwrap()
            .into_iter()
            .map(Found)
            .collect()
    }

    async fn read_text(&self, css: &str) -> Result<String, fantoccini::error::CmdError> {
        self.client.find(Locator::Css(css)).await?.text().await
    }

    /// The text of the first element matching `css`. Pages of running
    /// evaluations reload themselves, so a read that meets the reload is
    /// tried again.
    pub async fn text(&self, css: &str) -> String {
        let start = Instant::now();
        loop {
            match self.read_text(css).await {
                Ok(t) => return t,
                Err(e) if start.elapsed() < Duration::from_secs(5) => {
                    let _ = e;
                    tokio::time::sleep(Duration::from_millis(100)).await;
                }
                Err(e) => panic!("no text for {css}: {e}"),
            }
        }
    }

    /// Clicks something that navigates, and waits for the new page: the old
    /// document is marked first, so only a fresh, fully loaded one counts
    /// (the URL alone can change before the new document replaces the old).
    pub async fn click(&self, css: &str) {
        let mark = "document.documentElement.dataset.leaving = '1'";
        self.client.execute(mark, vec![]).await.unwrap();
        let target = self.client.find(Locator::Css(css)).await.unwrap();
        target.click().await.unwrap();
        let fresh = "return !document.documentElement.dataset.leaving \
                     && document.readyState === 'complete'";
        let start = Instant::now();
        loop {
            let done = self.client.execute(fresh, vec![]).await.ok();
            if done.as_ref().and_then(Value::as_bool) == Some(true) {
                return;
            }
            assert!(
                start.elapsed() < Duration::from_secs(20),
                "no new page after clicking {css}"
            );
            tokio::time::sleep(Duration::from_millis(50)).await;
        }
    }

    pub async fn select(&self, css: &str, value: &str) {
        let el = self.client.find(Locator::Css(css)).await.unwrap();
        el.select_by_value(value).await.unwrap();
    }

    pub async fn type_into(&self, css: &str, text: &str) {
        self.client
            .find(Locator::Css(css))
            .await
            .unwrap()
            .send_keys(text)
            .await
            .unwrap();
    }

    /// Runs a script in the page and returns what it returns.
    /// Runs a script in the page and returns what it returns; tried again
    /// when it meets a reload.
    pub async fn run(&self, script: &str) -> Value {
        let start = Instant::now();
        loop {
            match self.client.execute(script, vec![]).await {
                Ok(v) => return v,
                Err(e) if start.elapsed() < Duration::from_secs(5) => {
                    let _ = e;
                    tokio::time::sleep(Duration::from_millis(100)).await;
                }
                Err(e) => panic!("the script failed: {e}\n{script}"),
            }
        }
    }

    /// The text content of every element matching `css` (SVG text too,
    /// which WebDriver's element text leaves out).
    pub async fn texts(&self, css: &str) -> Vec<String> {
        let script = format!(
            "return Array.from(document.querySelectorAll({})).map(e => e.textContent);",
            serde_json::to_string(css).unwrap()
        );
        let v = self.run(&script).await;
        v.as_array()
            .unwrap()
            .iter()
            .map(|t| t.as_str().unwrap_or_default().to_string())
            .collect()
    }

    /// One attribute of every element matching `css`.
    pub async fn attrs(&self, css: &str, name: &str) -> Vec<String> {
        let script = format!(
            "return Array.from(document.querySelectorAll({})).map(e => e.getAttribute({}));",
            serde_json::to_string(css).unwrap(),
            serde_json::to_string(name).unwrap()
        );
        let v = self.run(&script).await;
        v.as_array()
            .unwrap()
            .iter()
            .map(|t| t.as_str().unwrap_or_default().to_string())
            .collect()
    }

    /// The page's address now.
    pub async fn url(&self) -> String {
        self.client.current_url().await.unwrap().to_string()
    }

    /// Where an element lies on the page (`getBoundingClientRect`).
    pub async fn rect(&self, css: &str) -> Rect {
        let script = format!(
            "const r = document.querySelector({}).getBoundingClientRect(); \
             return [r.left, r.right, r.top, r.bottom];",
            serde_json::to_string(css).unwrap()
        );
        let v = self.run(&script).await;
        let n = |i: usize| v[i].as_f64().unwrap();
        Rect {
            left: n(0),
            right: n(1),
            top: n(2),
            bottom: n(3),
        }
    }

    /// Sets the viewport's size, and waits until the page follows.
    pub async fn set_width(&self, width: u32, height: u32) {
        let params =
            json!({"width": width, "height": height, "deviceScaleFactor": 1, "mobile": false});
        self.client
            .issue_cmd(Cdp {
                cmd: "Emulation.setDeviceMetricsOverride",
                params,
            })
            .await
            .expect("chromedriver passes DevTools commands on");
        let start = Instant::now();
        while self.run("return window.innerWidth").await.as_u64() != Some(width as u64) {
            assert!(
                start.elapsed() < Duration::from_secs(5),
                "the viewport never became {width} px wide"
            );
            tokio::time::sleep(Duration::from_millis(50)).await;
        }
    }

    /// Screenshots of the whole page at 1280 and 1920 px wide, as
    /// NAME-1280.png and NAME-1920.png; the viewport returns to 1280 px.
    pub async fn screenshots(&self, name: &str) {
        for width in [1280, 1920] {
            self.set_width(width, 900).await;
            let height = self
                .run("return document.documentElement.scrollHeight")
                .await
                .as_u64()
                .unwrap_or(900)
                .clamp(600, 8000);
            self.set_width(width, height as u32).await;
            tokio::time::sleep(Duration::from_millis(100)).await;
            self.screenshot(&format!("{name}-{width}")).await;
        }
        self.set_width(1280, 1600).await;
    }

    /// The ids of the evaluation rows shown.
    pub async fn row_ids(&self) -> Vec<String> {
        let mut ids = Vec::new();
        for r in self.all("table#evaluations tr.row").await {
            ids.push(r.attr("data-id").await.unwrap());
        }
        ids
    }

    /// (done, stage text, status) of the evaluation page shown. The page
    /// reloads itself while the evaluation runs, so a read that meets the
    /// reload is tried again.
    pub async fn progress(&self) -> (u64, String, String) {
        for _ in 0..50 {
            if let Ok(p) = self.read_progress().await {
                return p;
            }
            tokio::time::sleep(Duration::from_millis(100)).await;
        }
        panic!("the evaluation page never showed its status");
    }

    async fn read_progress(&self) -> Result<(u64, String, String), fantoccini::error::CmdError> {
        let status = self.client.find(Locator::Css("#status")).await?;
        let state = status.attr("data-status").await?.unwrap_or_default();
        let done = match self.client.find(Locator::Css("#progress")).await {
            Ok(p) => p
                .attr("aria-valuenow")
                .await?
                .and_then(|v| v.parse().ok())
                .unwrap_or(0),
            Err(_) => 0,
        };
        Ok((done, status.text().await?, state))
    }

    /// Console messages at error level since the session started.
    pub async fn console_errors(&self) -> Vec<String> {
        let log: Value = self
            .client
            .issue_cmd(BrowserLog)
            .await
            .expect("chromedriver returns the browser log");
        log.as_array()
            .map(|entries| {
                entries
                    .iter()
                    .filter(|e| e["level"] == "SEVERE")
                    .map(|e| e["message"].as_str().unwrap_or_default().to_string())
                    .collect()
            })
            .unwrap_or_default()
    }

    /// Saves a screenshot for a person to look at; a page mid-reload may
    /// refuse one, which is no failure of the page.
    pub async fn screenshot(&self, name: &str) {
        let Ok(png) = self.client.screenshot().await else {
            eprintln!("screenshot {name} skipped: the page was reloading");
            return;
        };
        let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("target/dashboard-screens");
        std::fs::create_dir_all(&dir).unwrap();
        std::fs::write(dir.join(format!("{name}.png")), png).unwrap();
    }

    pub async fn close(self) {
        let _ = self.client.clone().close().await;
    }
}

impl Drop for Browser {
    /// Ends chromedriver and every browser process it started, however the
    /// test ended, before the profile folder is removed.
    fn drop(&mut self) {
        // SAFETY: killpg on the process group this struct's child leads.
        unsafe {
            libc::killpg(self.driver.id() as i32, libc::SIGKILL);
        }
        let _ = self.driver.wait();
    }
}
