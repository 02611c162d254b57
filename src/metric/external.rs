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
//! answering within the limit, writes a line that is not a response or that is longer than
//! its cap (the hello line [`HELLO_MAX`] bytes, an answer [`ANSWER_BYTES_PER_ITEM`] bytes per
//! item plus [`ANSWER_SLACK`]), writes more than one line for a request (a line read
//! together with its answer, or waiting before the next request is sent, or found by
//! [`ExternalMetric::check`] after the last answer), or gives the wrong number of
//! distances, waymark kills it and
//! reports a [`MetricError::Program`] naming the command and what happened. Its standard
//! error is read all the time (so the program never blocks on it), and only the last
//! [`STDERR_TAIL`] bytes are kept, for error messages. Text the program or the command
//! supplies is quoted with its control characters escaped
//! ([`crate::escape::escape_controls`]).
//!
//! The program runs in a process group of its own (Unix): on a failure, and when the metric
//! is dropped, the whole group is killed, so processes the program started end with it. The [`PreparedQuery`] methods cannot return errors: after a
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
use std::io::{BufRead, BufReader, Read, Write};
use std::process::{Child, Command, Stdio};
use std::sync::atomic::{AtomicUsize, Ordering};
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
/// Lines of the program's standard error quoted in error messages.
const STDERR_LINES: usize = 5;
/// Bytes of the program's standard error kept (its last ones) for error messages.
pub const STDERR_TAIL: usize = 4096;
/// Longest hello line accepted, in bytes.
pub const HELLO_MAX: usize = 8192;
/// Bytes allowed per distance in an answer line ...
pub const ANSWER_BYTES_PER_ITEM: usize = 64;
/// ... plus this much (room for an `{"error": …}` message).
pub const ANSWER_SLACK: usize = 64 * 1024;

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
    /// The last bytes of the program's standard error.
    stderr: Arc<Mutex<VecDeque<u8>>>,
    /// The longest output line accepted now, in bytes (set before each request).
    line_cap: Arc<AtomicUsize>,
}

struct Pipe {
    child: Child,
    /// Request lines to the writer thread (which owns the program's stdin); `None` once closed.
    requests: Option<Sender<Vec<u8>>>,
    /// Response lines from the reader thread, each with whether more output was already
    /// waiting behind it; disconnected at the program's end of output.
    responses: Receiver<Result<(String, bool), String>>,
    /// Whether more output was waiting behind the last line received.
    more_behind: bool,
    /// Requests answered so far (the hello line is not one).
    answered: u64,
}

impl Pipe {
    /// A line the program wrote that no request asked for (waiting before a request is
    /// sent, or after the last answer), as the protocol error that refuses it.
    fn stray_line(&mut self) -> Option<String> {
        let extra = if std::mem::take(&mut self.more_behind) {
            // Already read behind the last line: it comes at once.
            match self.responses.recv_timeout(Duration::from_secs(1)) {
                Ok(Ok((line, _))) => preview(&line),
                Ok(Err(e)) => e,
                Err(_) => "(a part of a line)".to_string(),
            }
        } else {
            match self.responses.try_recv() {
                Ok(Ok((line, _))) => preview(&line),
                Ok(Err(e)) => e,
                Err(_) => return None,
            }
        };
        let after = match self.answered {
            0 => "its hello line".to_string(),
            n => format!("its answer to request {n}"),
        };
        Some(format!(
            "broke the protocol: wrote a second line after {after}, where one line answers \
             one request: {extra}"
        ))
    }
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
        let shown = crate::escape::escape_controls(&command.join(" ")).into_owned();
        let fail = |message: String| MetricError::Program {
            command: shown.clone(),
            message,
        };
        let (program, args) = command
            .split_first()
            .ok_or_else(|| MetricError::Options("the metric command is empty".into()))?;
        let mut cmd = Command::new(program);
        cmd.args(args)
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped());
        #[cfg(unix)]
        std::os::unix::process::CommandExt::process_group(&mut cmd, 0);
        let mut child = cmd
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
        // At most one line waits in the channel: a program writing lines nobody asked for
        // fills its pipe and blocks instead of growing waymark's memory.
        let (resp_tx, resp_rx) = mpsc::sync_channel(1);
        let line_cap = Arc::new(AtomicUsize::new(HELLO_MAX));
        let cap = line_cap.clone();
        std::thread::spawn(move || {
            let mut r = BufReader::with_capacity(1 << 16, stdout);
            loop {
                let line = read_capped_line(&mut r, &cap);
                let end = !matches!(line, Ok(Some(_)));
                let sent = match line {
                    Ok(None) => break,
                    // Bytes already read behind the line were written before any next
                    // request could be answered: a second line for one request.
                    Ok(Some(line)) => resp_tx.send(Ok((line, !r.buffer().is_empty()))),
                    Err(e) => resp_tx.send(Err(e)),
                };
                if end || sent.is_err() {
                    break;
                }
            }
        });
        let tail = Arc::new(Mutex::new(VecDeque::with_capacity(STDERR_TAIL)));
        let tail2 = tail.clone();
        std::thread::spawn(move || {
            // Read everything, keep the last bytes: the program never blocks on its stderr.
            let mut stderr = stderr;
            let mut buf = vec![0u8; 16 * 1024];
            loop {
                let got = match stderr.read(&mut buf) {
                    Ok(0) => break,
                    Ok(got) => got,
                    Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                    Err(_) => break,
                };
                let chunk = &buf[got.saturating_sub(STDERR_TAIL)..got];
                let mut t = tail2.lock().unwrap_or_else(|e| e.into_inner());
                let over = (t.len() + chunk.len()).saturating_sub(STDERR_TAIL);
                t.drain(..over);
                t.extend(chunk);
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
                    more_behind: false,
                    answered: 0,
                }),
                failed: Mutex::new(None),
                stderr: tail,
                line_cap,
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
        if let Some(message) = &*self.inner.failed.lock().unwrap_or_else(|e| e.into_inner()) {
            return Err(self.inner.error(message.clone()));
        }
        // A line after the last answer breaks the protocol as one before a request does
        // (not looked for while another thread has a request out: it is checked then).
        let stray = match self.inner.pipe.try_lock() {
            Ok(mut pipe) => pipe.stray_line(),
            Err(std::sync::TryLockError::Poisoned(e)) => e.into_inner().stray_line(),
            Err(std::sync::TryLockError::WouldBlock) => None,
        };
        match stray {
            Some(message) => Err(self.inner.fail(message)),
            None => Ok(()),
        }
    }

    /// The command line, as shown in errors.
    pub fn command(&self) -> &str {
        &self.inner.command
    }
}

/// The first 200 characters of a line, control characters escaped, for error messages.
fn preview(line: &str) -> String {
    let t = line.trim_end();
    let mut s: String = t.chars().take(200).collect();
    if s.len() < t.len() {
        s.push('…');
    }
    format!("`{}`", crate::escape::escape_controls(&s))
}

/// One line of the program's output without its `\n` (`None` at the end of output), or
/// why it is refused: longer than the cap, not UTF-8, a read error. Reads at most the cap
/// (and one buffer) before refusing, whatever the program writes.
fn read_capped_line(r: &mut impl BufRead, cap: &AtomicUsize) -> Result<Option<String>, String> {
    let mut line = Vec::new();
    loop {
        let buf = match r.fill_buf() {
            Ok(b) => b,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => return Err(format!("reading its output failed: {e}")),
        };
        if buf.is_empty() {
            if line.is_empty() {
                return Ok(None);
            }
            break; // a last line without a newline
        }
        let (take, done) = match buf.iter().position(|&b| b == b'\n') {
            Some(i) => (i + 1, true),
            None => (buf.len(), false),
        };
        line.extend_from_slice(&buf[..take]);
        r.consume(take);
        let max = cap.load(Ordering::Relaxed);
        if line.len() > max.saturating_add(1) {
            return Err(format!(
                "wrote a line longer than {max} bytes (the most accepted there)"
            ));
        }
        if done {
            break;
        }
    }
    String::from_utf8(line)
        .map(Some)
        .map_err(|_| "wrote a line that is not UTF-8".to_string())
}

/// Kills the program's whole process group (the program and what it started) and reaps
/// the program. The group is killed before the program is reaped, so its id cannot have
/// been reused.
fn kill_group(child: &mut Child) {
    #[cfg(unix)]
    let pid = rustix::process::Pid::from_child(child);
    #[cfg(unix)]
    let _ = rustix::process::kill_process_group(pid, rustix::process::Signal::KILL);
    let _ = child.kill();
    let _ = child.wait();
}

/// The program's exit status, once it has exited, without reaping it (its process group
/// can still be killed safely).
#[cfg(unix)]
fn exit_status(child: &mut Child) -> Option<String> {
    use rustix::process::{Pid, WaitId, WaitIdOptions};
    let status = rustix::process::waitid(
        WaitId::Pid(Pid::from_child(child)),
        WaitIdOptions::EXITED | WaitIdOptions::NOHANG | WaitIdOptions::NOWAIT,
    )
    .ok()??;
    Some(match (status.exit_status(), status.terminating_signal()) {
        (Some(code), _) if status.exited() => format!("exit status: {code}"),
        (_, Some(sig)) => format!("signal: {sig}"),
        _ => "ended".to_string(),
    })
}

/// The program's exit status, once it has exited.
#[cfg(not(unix))]
fn exit_status(child: &mut Child) -> Option<String> {
    child.try_wait().ok()?.map(|s| s.to_string())
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
            kill_group(&mut pipe.child);
        }
        self.error(failed.clone().unwrap_or(message))
    }

    fn stderr_tail(&self) -> String {
        let bytes = Vec::from(
            self.stderr
                .lock()
                .unwrap_or_else(|e| e.into_inner())
                .clone(),
        );
        let text = String::from_utf8_lossy(&bytes);
        let lines: Vec<&str> = text
            .lines()
            .map(str::trim)
            .filter(|l| !l.is_empty())
            .collect();
        if lines.is_empty() {
            return String::new();
        }
        let last = lines[lines.len().saturating_sub(STDERR_LINES)..].join(" | ");
        format!(
            "; its last messages: {}",
            crate::escape::escape_controls(&last)
        )
    }

    /// Waits for one line, with the time limit.
    fn receive(&self, pipe: &mut Pipe, what: &str, limit: Duration) -> Result<String, String> {
        match pipe.responses.recv_timeout(limit) {
            Ok(Ok((line, more))) => {
                pipe.more_behind = more;
                Ok(line)
            }
            Ok(Err(e)) => Err(format!(
                "{e}, waiting for {what}; stopped it{}",
                self.stderr_tail()
            )),
            Err(RecvTimeoutError::Timeout) => Err(format!(
                "gave no answer ({what}) within {:.1} s; stopped it{}",
                limit.as_secs_f64(),
                self.stderr_tail()
            )),
            Err(RecvTimeoutError::Disconnected) => {
                // End of output: give the program a moment to exit, for its status.
                let start = Instant::now();
                let status = loop {
                    match exit_status(&mut pipe.child) {
                        Some(s) => break Some(s),
                        None if start.elapsed() < Duration::from_millis(500) => {
                            std::thread::sleep(Duration::from_millis(5))
                        }
                        None => break None,
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
            let cap = ANSWER_BYTES_PER_ITEM
                .saturating_mul(items.len())
                .saturating_add(ANSWER_SLACK);
            if let Some(stray) = pipe.stray_line() {
                Err(stray)
            } else {
                self.line_cap.store(cap, Ordering::Relaxed);
                let sent = pipe.requests.as_ref().is_some_and(|s| s.send(line).is_ok());
                let got = if sent {
                    self.receive(&mut pipe, "the distances", self.timeout)
                } else {
                    Err("its input is closed".into())
                };
                pipe.answered += 1;
                match (got, pipe.more_behind) {
                    (Ok(_), true) => Err(pipe.stray_line().unwrap_or_default()),
                    (got, _) => got,
                }
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
            return Err(self.fail(format!(
                "reported an error: {}",
                crate::escape::escape_controls(&message)
            )));
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
        while start.elapsed() < Duration::from_millis(500) && exit_status(&mut pipe.child).is_none()
        {
            std::thread::sleep(Duration::from_millis(2));
        }
        // Whatever the program started and left behind ends with it.
        kill_group(&mut pipe.child);
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

    fn check(&self) -> Result<(), MetricError> {
        ExternalMetric::check(self)
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
