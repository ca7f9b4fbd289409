//! `dynode serve DESIGN.ron`: the HTML report on a page on this machine only, solved again
//! whenever the design file is saved.
//!
//! The server binds to the loopback address alone (127.0.0.1), so nothing off the machine can
//! reach it. A watcher polls the file's modification time and length every 250 ms; on a change
//! once the file has stood still for one poll it reads, checks and solves the design (no pulse
//! train) and keeps the HTML report. When the
//! new text is refused or fails to solve, the page shows the error above the last good report.
//! The page asks `/version` every 500 ms and reloads when it changes (the one script; the report
//! file itself has none). `GET /` and `GET /version` are the only routes; anything else is 404.
//! Ctrl-C ends the process (the handler of [`crate::cli::output`]).

use std::io::{BufRead, BufReader, Write};
use std::net::{Ipv4Addr, TcpListener, TcpStream};
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::time::{Duration, SystemTime};

use crate::report::html::esc;

/// How often the file is looked at.
pub const POLL: Duration = Duration::from_millis(250);

/// What the page shows.
#[derive(Debug, Clone, Default)]
pub struct State {
    /// Bumped at every solve, good or bad.
    pub version: u64,
    /// The last report that solved, if any.
    pub report: Option<String>,
    /// The error of the last attempt, if it failed.
    pub error: Option<String>,
}

/// Read, check and solve the design; the HTML report or the error in words.
pub fn solve(path: &Path) -> Result<String, String> {
    let d = crate::cli::basic::load_design(path).map_err(|e| e.to_string())?;
    let a = crate::analysis::analyse_with(&d, None).map_err(|e| e.to_string())?;
    Ok(crate::report::html::render(&a))
}

fn stamp(path: &Path) -> Option<(SystemTime, u64)> {
    std::fs::metadata(path)
        .ok()
        .and_then(|m| m.modified().ok().map(|t| (t, m.len())))
}

/// Solve once more and record the outcome.
pub fn refresh(path: &Path, state: &Mutex<State>) {
    let outcome = solve(path);
    let mut s = state.lock().unwrap_or_else(|p| p.into_inner());
    s.version += 1;
    match outcome {
        Ok(html) => {
            s.report = Some(html);
            s.error = None;
        }
        Err(e) => s.error = Some(e),
    }
}

/// The reload script: the page carries the version it shows, so a save made while the page
/// loads is not missed.
fn reload_script(version: u64) -> String {
    format!(
        r#"<script>
(function () {{
  var shown = "{version}";
  function ask() {{
    fetch('/version', {{cache: 'no-store'}}).then(function (r) {{ return r.text(); }})
      .then(function (v) {{ if (v !== shown) {{ location.reload(); }} }})
      .catch(function () {{}});
  }}
  setInterval(ask, 500);
  ask();
}})();
</script>"#
    )
}

/// The page for a state: the error banner (if any) above the last good report, and the
/// reload script.
pub fn page(s: &State, file: &str) -> String {
    let banner = |msg: &str| {
        format!(
            "<div id=\"serve-error\" style=\"border:3px solid #b00000;background:#fff3f3;padding:0.6em 1em;margin:1em auto;max-width:1040px;font-family:sans-serif\"><strong>The design could not be solved; the page shows the last good report.</strong><p style=\"white-space:pre-wrap;font-family:monospace\">{}</p></div>",
            esc(msg)
        )
    };
    let status = format!(
        "<div id=\"serve-status\" style=\"font:12px sans-serif;color:#555;max-width:1040px;margin:0.5em auto\">dynode serve: {} — solved again on every save (version {})</div>",
        esc(file),
        s.version
    );
    let reload = reload_script(s.version);
    let mut top = status;
    if let Some(e) = &s.error {
        top.push_str(&banner(e));
    }
    match &s.report {
        Some(html) => {
            let mut out = html.replacen("<body>", &format!("<body>\n{top}"), 1);
            out = out.replacen("</body>", &format!("{reload}\n</body>"), 1);
            out
        }
        None => format!(
            "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>dynode serve</title></head><body>\n{top}\n<p>No report yet: the design has not solved since the server started.</p>\n{reload}\n</body></html>\n"
        ),
    }
}

fn respond(mut stream: TcpStream, state: &Mutex<State>, file: &str) {
    let _ = stream.set_read_timeout(Some(Duration::from_secs(5)));
    let _ = stream.set_write_timeout(Some(Duration::from_secs(5)));
    let mut reader = BufReader::new(match stream.try_clone() {
        Ok(s) => s,
        Err(_) => return,
    });
    let mut request = String::new();
    if reader.read_line(&mut request).is_err() || request.len() > 8192 {
        return;
    }
    // Read the headers to their end (bounded), then answer and close.
    for _ in 0..100 {
        let mut h = String::new();
        match reader.read_line(&mut h) {
            Ok(0) | Err(_) => break,
            Ok(_) if h == "\r\n" || h == "\n" => break,
            Ok(_) => {}
        }
    }
    let mut parts = request.split_whitespace();
    let (method, target) = (parts.next().unwrap_or(""), parts.next().unwrap_or(""));
    let (code, kind, body) = if method != "GET" {
        (
            "405 Method Not Allowed",
            "text/plain",
            "GET only\n".to_string(),
        )
    } else {
        let s = state.lock().unwrap_or_else(|p| p.into_inner()).clone();
        match target {
            "/" | "/index.html" => ("200 OK", "text/html; charset=utf-8", page(&s, file)),
            "/version" => ("200 OK", "text/plain", s.version.to_string()),
            _ => ("404 Not Found", "text/plain", "not found\n".to_string()),
        }
    };
    let _ = write!(
        stream,
        "HTTP/1.1 {code}\r\nContent-Type: {kind}\r\nContent-Length: {}\r\nCache-Control: no-store\r\nConnection: close\r\n\r\n",
        body.len()
    );
    let _ = stream.write_all(body.as_bytes());
    let _ = stream.flush();
    if code.starts_with("200") && kind.starts_with("text/html") {
        // One line per page load, so that the one editing sees the page follow.
        let v = state.lock().map(|s| s.version).unwrap_or(0);
        let _ = writeln!(std::io::stderr(), "dynode: page sent (version {v})");
    }
}

/// Serve `path` on `127.0.0.1:port` (0: a free port) until the process is stopped. `ready`
/// is called once with the address, when the page can be asked for.
pub fn run(
    path: &Path,
    port: u16,
    ready: impl FnOnce(std::net::SocketAddr),
) -> Result<(), crate::cli::basic::CommandError> {
    use crate::cli::basic::CommandError;
    // The file must exist and be readable as text at the start; later errors go on the page.
    crate::design::read_text(path, "design")?;
    let listener = TcpListener::bind((Ipv4Addr::LOCALHOST, port)).map_err(|e| {
        CommandError::BadInput(format!("--port {port}: cannot listen on 127.0.0.1: {e}"))
    })?;
    let addr = listener
        .local_addr()
        .map_err(|e| CommandError::BadInput(e.to_string()))?;
    let state = Arc::new(Mutex::new(State::default()));
    refresh(path, &state);
    let file = crate::report::one_line(&path.display().to_string());
    {
        let state = Arc::clone(&state);
        let path: PathBuf = path.to_path_buf();
        std::thread::spawn(move || {
            // Solve what was last solved's successor only once the file has stood still for
            // one poll, so that a save caught half-written is not taken for the design.
            let mut solved = stamp(&path);
            let mut seen = solved;
            loop {
                std::thread::sleep(POLL);
                let now = stamp(&path);
                if now == seen && now != solved {
                    solved = now;
                    refresh(&path, &state);
                }
                seen = now;
            }
        });
    }
    ready(addr);
    for stream in listener.incoming() {
        let Ok(stream) = stream else { continue };
        // Only this machine can connect (loopback), but check the peer all the same.
        if !stream.peer_addr().is_ok_and(|a| a.ip().is_loopback()) {
            continue;
        }
        let state = Arc::clone(&state);
        let file = file.clone();
        std::thread::spawn(move || respond(stream, &state, &file));
    }
    Ok(())
}
