//! A metric computed by another program, spoken to over a pipe in JSON Lines.
//!
//! # Protocol (version 1)
//!
//! waymark starts the program and talks to it on its standard input and output, one JSON
//! object per line (UTF-8, `\n`-terminated). Standard error is free for the program's own
//! messages; the last lines are quoted when the program fails.
//!
//! 1. **Hello.** The program's first line announces the protocol:
//!    `{"protocol": "waymark-metric", "version": 1}` (other fields, e.g. `"name"`, are
//!    ignored). Another protocol or version is refused.
//! 2. **Batches.** waymark writes a request, the program answers with one line:
//!    ```text
//!    → {"query": "Orvane Quay", "items": ["Orvane Kay", "Keth Landing"]}
//!    ← {"distances": [2, 9.5]}
//!    ```
//!    One distance per item, in item order, as JSON numbers (finite and non-negative).
//!    A program that cannot answer says why: `{"error": "message"}`; waymark stops and
//!    reports the message. Items that are not valid UTF-8 are sent with each invalid
//!    sequence replaced by U+FFFD.
//! 3. **End.** waymark closes the program's standard input; the program should exit.
//!
//! The distances must be a metric (symmetric, zero on equal items, triangle inequality) for
//! the search's lower bounds to be valid; waymark cannot check that for you.
//!
//! # Failures
//!
//! Each batch has a time limit ([`ExternalMetric::spawn`]). When the program exits, stops
//! answering within the limit, writes a line that is not a response, or gives the wrong
//! number of distances, waymark kills it and reports a [`MetricError::Program`] naming the
//! command and what happened. The [`PreparedQuery`] methods cannot return errors: after a
//! failure they give NaN, and [`ExternalMetric::check`] returns the error; callers check it
//! after each batch. [`ExternalQuery::try_distances`] returns it directly.
//!
//! `examples/metric_server.py` is a complete program in Python.
//!
//! ```no_run
//! use std::time::Duration;
//! use waymark::metric::{ExternalMetric, Metric, PreparedQuery};
//!
//! let cmd = ["python3".to_string(), "examples/metric_server.py".to_string()];
//! let m = ExternalMetric::spawn(&cmd, Duration::from_secs(10))?;
//! let q = m.prepare(b"Orvane Quay");
//! let d = q.try_distances(&[b"Orvane Kay".as_slice(), b"Keth Landing"])?;
//! assert_eq!(d[0], 2.0);
//! # Ok::<(), waymark::metric::MetricError>(())
//! ```

use std::collections::VecDeque;
use std::io::{BufRead, BufReader, Write};
use std::process::{Child, Command, Stdio};
use std::sync::mpsc::{self, Receiver, RecvTimeoutError, Sender};
use std::sync::{Arc, Mutex, MutexGuard};
use std::time::{Duration, Instant};

use serde::{Deserialize, Serialize};

use super::{Metric, MetricError, MetricKind, PreparedQuery};

/// The protocol name in the hello line.
pub const PROTOCOL: &str = "waymark-metric";
/// The protocol version spoken.
pub const PROTOCOL_VERSION: u64 = 1;
/// Largest number of items sent in one request by [`PreparedQuery::distances`].
pub const MAX_BATCH: usize = 4096;
/// The least time allowed for the hello line (an interpreter may be slow to start).
const START_TIMEOUT: Duration = Duration::from_secs(10);
/// Lines of the program's standard error kept for error messages.
const STDERR_LINES: usize = 5;

/// A metric computed by an external program (see the module documentation).
#[derive(Clone)]
pub struct ExternalMetric {
    inner: Arc<Inner>,
}

impl std::fmt::Debug for ExternalMetric {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("ExternalMetric")
            .field("command", &self.inner.command)
            .finish()
    }
}

struct Inner {
    command: String,
    timeout: Duration,
    pipe: Mutex<Pipe>,
    /// The first failure; every later call fails with it.
    failed: Mutex<Option<String>>,
    stderr: Arc<Mutex<VecDeque<String>>>,
}

struct Pipe {
    child: Child,
    /// Request lines to the writer thread (which owns the program's stdin); `None` once closed.
    requests: Option<Sender<Vec<u8>>>,
    /// Response lines from the reader thread; disconnected at the program's end of output.
    responses: Receiver<std::io::Result<String>>,
}

#[derive(Serialize)]
struct Request<'a> {
    query: &'a str,
    items: Vec<std::borrow::Cow<'a, str>>,
}

#[derive(Deserialize)]
struct Response {
    distances: Option<Vec<f64>>,
    error: Option<String>,
}

#[derive(Deserialize)]
struct Hello {
    protocol: Option<String>,
    version: Option<u64>,
}

impl ExternalMetric {
    /// Starts `command` (program and arguments) and reads its hello line; `timeout` limits
    /// the wait for each batch's answer (and for the hello, which gets at least 10 s).
    pub fn spawn(command: &[String], timeout: Duration) -> Result<Self, MetricError> {
        let shown = command.join(" ");
        let fail = |message: String| MetricError::Program {
            command: shown.clone(),
            message,
        };
        let (program, args) = command
            .split_first()
            .ok_or_else(|| MetricError::Options("the metric command is empty".into()))?;
        let mut child = Command::new(program)
            .args(args)
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .map_err(|e| fail(format!("could not start: {e}")))?;
        let (stdin, stdout, stderr) = (
            child.stdin.take().expect("piped stdin"),
            child.stdout.take().expect("piped stdout"),
            child.stderr.take().expect("piped stderr"),
        );
        let (req_tx, req_rx) = mpsc::channel::<Vec<u8>>();
        std::thread::spawn(move || {
            let mut stdin = std::io::BufWriter::new(stdin);
            for line in req_rx {
                if stdin.write_all(&line).and_then(|_| stdin.flush()).is_err() {
                    break; // the program is gone; the reader reports it
                }
            }
        });
        let (resp_tx, resp_rx) = mpsc::channel();
        std::thread::spawn(move || {
            let mut r = BufReader::with_capacity(1 << 16, stdout);
            loop {
                let mut line = String::new();
                match r.read_line(&mut line) {
                    Ok(0) => break,
                    Ok(_) => {
                        if resp_tx.send(Ok(line)).is_err() {
                            break;
                        }
                    }
                    Err(e) => {
                        let _ = resp_tx.send(Err(e));
                        break;
                    }
                }
            }
        });
        let tail = Arc::new(Mutex::new(VecDeque::new()));
        let tail2 = tail.clone();
        std::thread::spawn(move || {
            for line in BufReader::new(stderr).lines() {
                let Ok(line) = line else { break };
                let mut t = tail2.lock().unwrap_or_else(|e| e.into_inner());
                if t.len() == STDERR_LINES {
                    t.pop_front();
                }
                t.push_back(line);
            }
        });
        let m = ExternalMetric {
            inner: Arc::new(Inner {
                command: shown,
                timeout,
                pipe: Mutex::new(Pipe {
                    child,
                    requests: Some(req_tx),
                    responses: resp_rx,
                }),
                failed: Mutex::new(None),
                stderr: tail,
            }),
        };
        let line = {
            let mut pipe = m.inner.lock_pipe();
            m.inner
                .receive(&mut pipe, "the hello line", timeout.max(START_TIMEOUT))
        };
        let line = line.map_err(|message| m.inner.fail(message))?;
        let hello: Hello = serde_json::from_str(&line).map_err(|e| {
            m.inner.fail(format!(
                "its first line must be the hello {{\"protocol\": \"{PROTOCOL}\", \"version\": \
                 {PROTOCOL_VERSION}}}, not {} ({e})",
                preview(&line)
            ))
        })?;
        if hello.protocol.as_deref() != Some(PROTOCOL) || hello.version != Some(PROTOCOL_VERSION) {
            return Err(m.inner.fail(format!(
                "speaks protocol {:?} version {:?}; this waymark speaks \"{PROTOCOL}\" version \
                 {PROTOCOL_VERSION}",
                hello.protocol.unwrap_or_default(),
                hello.version.unwrap_or(0),
            )));
        }
        Ok(m)
    }

    /// The first failure of the program, if any (after which distances are NaN).
    pub fn check(&self) -> Result<(), MetricError> {
        match &*self.inner.failed.lock().unwrap_or_else(|e| e.into_inner()) {
            None => Ok(()),
            Some(message) => Err(self.inner.error(message.clone())),
        }
    }

    /// The command line, as shown in errors.
    pub fn command(&self) -> &str {
        &self.inner.command
    }
}

/// The first 200 characters of a line, for error messages.
fn preview(line: &str) -> String {
    let t = line.trim_end();
    let mut s: String = t.chars().take(200).collect();
    if s.len() < t.len() {
        s.push('…');
    }
    format!("`{s}`")
}

impl Inner {
    fn lock_pipe(&self) -> MutexGuard<'_, Pipe> {
        self.pipe.lock().unwrap_or_else(|e| e.into_inner())
    }

    fn error(&self, message: String) -> MetricError {
        MetricError::Program {
            command: self.command.clone(),
            message,
        }
    }

    /// Records the first failure, kills the program and returns the error.
    fn fail(&self, message: String) -> MetricError {
        let mut failed = self.failed.lock().unwrap_or_else(|e| e.into_inner());
        if failed.is_none() {
            *failed = Some(message.clone());
            let mut pipe = self.lock_pipe();
            pipe.requests = None;
            let _ = pipe.child.kill();
            let _ = pipe.child.wait();
        }
        self.error(failed.clone().unwrap_or(message))
    }

    fn stderr_tail(&self) -> String {
        let t = self.stderr.lock().unwrap_or_else(|e| e.into_inner());
        if t.is_empty() {
            String::new()
        } else {
            format!("; its last messages: {}", Vec::from(t.clone()).join(" | "))
        }
    }

    /// Waits for one line, with the time limit.
    fn receive(&self, pipe: &mut Pipe, what: &str, limit: Duration) -> Result<String, String> {
        match pipe.responses.recv_timeout(limit) {
            Ok(Ok(line)) => Ok(line),
            Ok(Err(e)) => Err(format!("reading its output failed: {e}")),
            Err(RecvTimeoutError::Timeout) => Err(format!(
                "gave no answer ({what}) within {:.1} s; stopped it{}",
                limit.as_secs_f64(),
                self.stderr_tail()
            )),
            Err(RecvTimeoutError::Disconnected) => {
                // End of output: give the program a moment to exit, for its status.
                let start = Instant::now();
                let status = loop {
                    match pipe.child.try_wait() {
                        Ok(Some(s)) => break Some(s),
                        Ok(None) if start.elapsed() < Duration::from_millis(500) => {
                            std::thread::sleep(Duration::from_millis(5))
                        }
                        _ => break None,
                    }
                };
                // Give the stderr thread a moment to read the last lines.
                std::thread::sleep(Duration::from_millis(20));
                let how = match status {
                    Some(s) => format!("exited ({s})"),
                    None => "closed its output".into(),
                };
                Err(format!("{how} before sending {what}{}", self.stderr_tail()))
            }
        }
    }

    /// One request and its response.
    fn batch(&self, query: &[u8], items: &[&[u8]]) -> Result<Vec<f64>, MetricError> {
        if let Some(message) = &*self.failed.lock().unwrap_or_else(|e| e.into_inner()) {
            return Err(self.error(message.clone()));
        }
        if items.is_empty() {
            return Ok(Vec::new());
        }
        let query = String::from_utf8_lossy(query);
        let req = Request {
            query: &query,
            items: items.iter().map(|i| String::from_utf8_lossy(i)).collect(),
        };
        let mut line = serde_json::to_vec(&req).expect("strings serialise");
        line.push(b'\n');
        let answer = {
            let mut pipe = self.lock_pipe();
            let sent = pipe.requests.as_ref().is_some_and(|s| s.send(line).is_ok());
            if sent {
                self.receive(&mut pipe, "the distances", self.timeout)
            } else {
                Err("its input is closed".into())
            }
        };
        let line = answer.map_err(|m| self.fail(m))?;
        let resp: Response = serde_json::from_str(&line).map_err(|e| {
            self.fail(format!(
                "answered a line that is not a response: {} ({e})",
                preview(&line)
            ))
        })?;
        if let Some(message) = resp.error {
            return Err(self.fail(format!("reported an error: {message}")));
        }
        let Some(d) = resp.distances else {
            return Err(self.fail(format!(
                "answered without \"distances\": {}",
                preview(&line)
            )));
        };
        if d.len() != items.len() {
            return Err(self.fail(format!(
                "answered {} distances for {} items",
                d.len(),
                items.len()
            )));
        }
        if let Some((i, v)) = d.iter().enumerate().find(|(_, v)| **v < 0.0) {
            return Err(self.fail(format!(
                "answered a negative distance ({v}) for item {} of the batch",
                i + 1
            )));
        }
        Ok(d)
    }
}

impl Drop for Inner {
    fn drop(&mut self) {
        let pipe = self.pipe.get_mut().unwrap_or_else(|e| e.into_inner());
        pipe.requests = None; // the writer thread ends and closes the program's input
        let start = Instant::now();
        while start.elapsed() < Duration::from_millis(500) {
            if let Ok(Some(_)) = pipe.child.try_wait() {
                return;
            }
            std::thread::sleep(Duration::from_millis(2));
        }
        let _ = pipe.child.kill();
        let _ = pipe.child.wait();
    }
}

/// A query prepared for [`ExternalMetric`] (the query text; the work is in the program).
#[derive(Clone)]
pub struct ExternalQuery {
    inner: Arc<Inner>,
    query: Vec<u8>,
}

impl std::fmt::Debug for ExternalQuery {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("ExternalQuery")
            .field("command", &self.inner.command)
            .field("query", &String::from_utf8_lossy(&self.query))
            .finish()
    }
}

impl ExternalQuery {
    /// The distances to `items`, sent in batches of at most [`MAX_BATCH`], or the error.
    pub fn try_distances(&self, items: &[&[u8]]) -> Result<Vec<f64>, MetricError> {
        let mut out = Vec::with_capacity(items.len());
        for chunk in items.chunks(MAX_BATCH) {
            out.extend(self.inner.batch(&self.query, chunk)?);
        }
        Ok(out)
    }
}

impl Metric for ExternalMetric {
    type Prepared = ExternalQuery;

    fn kind(&self) -> MetricKind {
        MetricKind::External
    }

    fn prepare(&self, query: &[u8]) -> ExternalQuery {
        ExternalQuery {
            inner: self.inner.clone(),
            query: query.to_vec(),
        }
    }
}

impl PreparedQuery for ExternalQuery {
    /// One item in one request: prefer [`PreparedQuery::distances`].
    fn distance(&self, item: &[u8]) -> f64 {
        self.inner
            .batch(&self.query, &[item])
            .map_or(f64::NAN, |d| d[0])
    }

    /// All items in batches of at most [`MAX_BATCH`]; NaN everywhere after a failure.
    fn distances(&self, items: &[&[u8]], out: &mut [f64]) {
        assert_eq!(items.len(), out.len(), "one output slot per item");
        match self.try_distances(items) {
            Ok(d) => out.copy_from_slice(&d),
            Err(_) => out.fill(f64::NAN),
        }
    }

    /// Every call is a round trip to the program: all items at once.
    fn group_size(&self) -> usize {
        usize::MAX
    }
}
