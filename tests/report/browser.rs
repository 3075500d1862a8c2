//! The page in a real browser: headless Chromium, driven by chromedriver over the W3C WebDriver
//! protocol (plain HTTP/JSON on localhost), opens `report.html` from disk and must show no console
//! errors, decode every image (naturalWidth > 0) and give a screenshot that is not blank.
//!
//! Chromium and chromedriver come from Debian (`apt-get install -y chromium chromium-driver`,
//! or `.ci/deps`); without them this test fails and says how to install them.

use std::io::{Read, Write};
use std::net::{TcpListener, TcpStream};
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use base64::Engine;
use serde_json::{Value, json};
use tidemark::report::*;

use super::fixture::{decode, grey_variance, sample_input};
use super::html::check_self_contained;

const CHROMIUM: &str = "/usr/bin/chromium";
const CHROMEDRIVER: &str = "/usr/bin/chromedriver";

/// A running chromedriver (and its browser session), ended on drop.
struct Driver {
    child: Child,
    port: u16,
    session: Option<String>,
}

impl Drop for Driver {
    fn drop(&mut self) {
        if let Some(id) = self.session.take() {
            let _ = http(self.port, "DELETE", &format!("/session/{id}"), None);
        }
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// One HTTP/1.1 request to chromedriver; returns the status code and the JSON body.
fn http(port: u16, method: &str, path: &str, body: Option<&Value>) -> Result<(u16, Value), String> {
    let mut stream =
        TcpStream::connect(("127.0.0.1", port)).map_err(|e| format!("connect: {e}"))?;
    stream.set_read_timeout(Some(Duration::from_secs(30))).ok();
    let body = body.map(|b| b.to_string()).unwrap_or_default();
    let req = format!(
        "{method} {path} HTTP/1.1\r\nHost: 127.0.0.1:{port}\r\nContent-Type: application/json; charset=utf-8\r\n\
         Content-Length: {}\r\nConnection: close\r\n\r\n{body}",
        body.len()
    );
    stream
        .write_all(req.as_bytes())
        .map_err(|e| format!("send: {e}"))?;
    // read the header, then exactly Content-Length bytes (or chunks until the last one)
    let mut raw = Vec::new();
    let mut chunk = [0u8; 65536];
    let split = loop {
        if let Some(p) = raw.windows(4).position(|w| w == b"\r\n\r\n") {
            break p;
        }
        let n = stream
            .read(&mut chunk)
            .map_err(|e| format!("receive: {e}"))?;
        if n == 0 {
            return Err("connection closed before the HTTP header ended".to_string());
        }
        raw.extend_from_slice(&chunk[..n]);
    };
    let head = String::from_utf8_lossy(&raw[..split]).to_ascii_lowercase();
    let status: u16 = head
        .split_whitespace()
        .nth(1)
        .and_then(|s| s.parse().ok())
        .ok_or_else(|| format!("bad status line: {head}"))?;
    let length: Option<usize> = head
        .lines()
        .find_map(|l| l.strip_prefix("content-length:"))
        .and_then(|v| v.trim().parse().ok());
    let chunked = head.contains("transfer-encoding:") && head.contains("chunked");
    let mut payload = raw[split + 4..].to_vec();
    loop {
        let done = match length {
            Some(n) => payload.len() >= n,
            None if chunked => payload.ends_with(b"0\r\n\r\n"),
            None => false,
        };
        if done {
            break;
        }
        let n = stream
            .read(&mut chunk)
            .map_err(|e| format!("receive: {e}"))?;
        if n == 0 {
            break;
        }
        payload.extend_from_slice(&chunk[..n]);
    }
    if chunked {
        let mut out = Vec::new();
        let mut rest = &payload[..];
        loop {
            let eol = rest
                .windows(2)
                .position(|w| w == b"\r\n")
                .ok_or("bad chunk")?;
            let size = usize::from_str_radix(String::from_utf8_lossy(&rest[..eol]).trim(), 16)
                .map_err(|e| format!("bad chunk size: {e}"))?;
            if size == 0 {
                break;
            }
            out.extend_from_slice(&rest[eol + 2..eol + 2 + size]);
            rest = &rest[eol + 4 + size..];
        }
        payload = out;
    }
    let json = if payload.is_empty() {
        Value::Null
    } else {
        serde_json::from_slice(&payload).map_err(|e| format!("bad JSON from chromedriver: {e}"))?
    };
    Ok((status, json))
}

fn ok(r: Result<(u16, Value), String>, what: &str) -> Value {
    match r {
        Ok((200, v)) => v["value"].clone(),
        Ok((code, v)) => panic!("{what}: chromedriver answered {code}: {v}"),
        Err(e) => panic!("{what}: {e}"),
    }
}

fn require_browser() {
    let missing: Vec<&str> = [CHROMIUM, CHROMEDRIVER]
        .into_iter()
        .filter(|p| !Path::new(p).exists())
        .collect();
    assert!(
        missing.is_empty(),
        "the browser test needs Debian's chromium and chromium-driver packages; missing {missing:?}. \
         Install them with `apt-get update && apt-get install -y chromium chromium-driver` \
         (or run `bash .ci/deps`)."
    );
}

fn start_driver() -> Driver {
    let port = TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    let child = Command::new(CHROMEDRIVER)
        .arg(format!("--port={port}"))
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap_or_else(|e| panic!("cannot start {CHROMEDRIVER}: {e}"));
    let driver = Driver {
        child,
        port,
        session: None,
    };
    let deadline = Instant::now() + Duration::from_secs(15);
    loop {
        if let Ok((200, v)) = http(port, "GET", "/status", None)
            && v["value"]["ready"] == json!(true)
        {
            return driver;
        }
        assert!(
            Instant::now() < deadline,
            "chromedriver did not become ready on port {port} within 15 s"
        );
        std::thread::sleep(Duration::from_millis(100));
    }
}

#[test]
fn page_renders_in_headless_chromium() {
    let dir = tempfile::tempdir().unwrap();
    let input = sample_input(dir.path());
    let page = write_html(&input, dir.path()).unwrap();
    let html = std::fs::read_to_string(&page).unwrap();
    let n_images = check_self_contained(&html);
    assert!(n_images > 20);
    check_page_in_browser(&page, n_images, "Skerrow Bank");
}

/// Opens `page` from disk in headless Chromium and checks: `n_images` images that all decode
/// (naturalWidth > 0), no scripts, seven sections, a title containing `title`, no console errors,
/// and a screenshot that is not blank.
pub(crate) fn check_page_in_browser(page: &std::path::Path, n_images: usize, title: &str) {
    require_browser();
    let profile = tempfile::tempdir().unwrap();
    let mut driver = start_driver();
    let caps = json!({
        "capabilities": { "alwaysMatch": {
            "browserName": "chrome",
            "goog:chromeOptions": {
                "binary": CHROMIUM,
                "args": [
                    "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                    "--disable-component-update", "--no-first-run", "--disable-dev-shm-usage",
                    format!("--user-data-dir={}", profile.path().display()),
                    "--window-size=1280,1600"
                ]
            },
            "goog:loggingPrefs": { "browser": "ALL" }
        }}
    });
    let session = ok(
        http(driver.port, "POST", "/session", Some(&caps)),
        "new session",
    );
    let id = session["sessionId"]
        .as_str()
        .expect("session id")
        .to_string();
    driver.session = Some(id.clone());
    let port = driver.port;

    let url = format!("file://{}", page.canonicalize().unwrap().display());
    ok(
        http(
            port,
            "POST",
            &format!("/session/{id}/url"),
            Some(&json!({ "url": url })),
        ),
        "open page",
    );

    let script = json!({
        "script": "return { widths: Array.from(document.images).map(i => i.complete ? i.naturalWidth : -1), \
                   scripts: document.scripts.length, sections: document.querySelectorAll('section').length, \
                   title: document.title }",
        "args": []
    });
    let facts = ok(
        http(
            port,
            "POST",
            &format!("/session/{id}/execute/sync"),
            Some(&script),
        ),
        "inspect page",
    );
    let widths: Vec<i64> = facts["widths"]
        .as_array()
        .expect("widths")
        .iter()
        .map(|w| w.as_i64().unwrap_or(-1))
        .collect();
    assert_eq!(
        widths.len(),
        n_images,
        "images in the browser vs in the file"
    );
    assert!(
        widths.iter().all(|&w| w > 0),
        "images that did not decode: {widths:?}"
    );
    assert_eq!(facts["scripts"], json!(0));
    assert_eq!(
        facts["sections"],
        json!(8),
        "seven numbered sections and the field totals"
    );
    assert!(facts["title"].as_str().unwrap_or("").contains(title));

    let log = ok(
        http(
            port,
            "POST",
            &format!("/session/{id}/se/log"),
            Some(&json!({ "type": "browser" })),
        ),
        "browser log",
    );
    let errors: Vec<&Value> = log
        .as_array()
        .expect("log entries")
        .iter()
        .filter(|e| e["level"] == json!("SEVERE"))
        .collect();
    assert!(errors.is_empty(), "console errors: {errors:?}");

    let shot = ok(
        http(port, "GET", &format!("/session/{id}/screenshot"), None),
        "screenshot",
    );
    let bytes = base64::engine::general_purpose::STANDARD
        .decode(shot.as_str().expect("base64 screenshot"))
        .unwrap();
    let d = decode(&bytes);
    assert!(
        d.width > 100 && d.height > 100,
        "screenshot {} x {}",
        d.width,
        d.height
    );
    let v = grey_variance(&d);
    assert!(v > 50.0, "screenshot looks blank (grey variance {v})");
}
