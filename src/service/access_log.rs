//! Where `ogive serve`'s log lines go: one shared buffer that every thread appends whole lines
//! to, and one background thread that writes it out, so that no request waits for the log's
//! file or pipe and a busy server writes many lines with each system call. The request line of
//! every answered request is written here directly, by hand, without the logging crate's event
//! dispatch; every other event still goes through the logging crate, whose writer is this
//! buffer too (so the lines of one process keep the order they were appended in).
//!
//! ```text
//! append      a whole line, under the buffer's lock (a copy, never a system call); the writer
//!             is woken only by the first line after it went idle, or when the buffer passes
//!             GATHER_BYTES
//! writer      wakes at the first line, gathers lines for at most GATHER_TIME (or until
//!             GATHER_BYTES are waiting), swaps the buffer for an empty one and writes it in
//!             one call; sleeps without a timer while nothing is waiting
//! full        past HELD_BYTES waiting (the output has stopped taking lines), an appending
//!             thread waits for the writer: lines are never dropped
//! end         dropping the [`LogGuard`] writes what is waiting and stops the writer; a line
//!             appended after that is written at once, by the thread that appends it
//! ```
//!
//! A process killed outright (SIGKILL) loses the lines of its last GATHER_TIME.
//!
//! The request line has the bytes the logging crate's path writes for the same event through
//! `cli::log_line` (the tests hold the two to that):
//!
//! ```text
//! {"timestamp":"2026-03-01T09:30:00.125250Z","level":"INFO","message":"request","request_id":"…","route":"…","method":"POST","status":200,"latency_ms":0.12,"model":"…","version":"…","observations":"…","target":"ogive::service::middleware"}
//! ```
//!
//! `model`, `version` and `observations` only when the request has them.

use std::cell::RefCell;
use std::io::Write;
use std::sync::{Arc, Condvar, Mutex, MutexGuard, OnceLock};
use std::thread::JoinHandle;
use std::time::{Duration, SystemTime, UNIX_EPOCH};

use crate::json_text::{push_f64, push_str, push_u64};

/// The longest the writer lets lines gather before writing them.
pub const GATHER_TIME: Duration = Duration::from_millis(2);
/// Waiting bytes that make the writer write at once.
pub const GATHER_BYTES: usize = 64 * 1024;
/// Waiting bytes past which an appending thread waits for the writer.
pub const HELD_BYTES: usize = 8 * 1024 * 1024;

/// The target the request line names: the middleware's module, as the event it replaces did.
pub const REQUEST_TARGET: &str = "ogive::service::middleware";

/// What the buffer's lock guards.
struct State {
    /// Lines appended and not yet handed to the writer.
    waiting: Vec<u8>,
    /// The writer is asleep waiting for a first line.
    writer_idle: bool,
    /// The guard was dropped: the writer writes what is waiting and stops.
    stopping: bool,
    /// The writer has stopped: lines are written by the thread that appends them.
    closed: bool,
}

struct Shared {
    state: Mutex<State>,
    /// Wakes the writer.
    wake: Condvar,
    /// Wakes threads waiting for room.
    room: Condvar,
    out: Mutex<Box<dyn Write + Send>>,
}

impl Shared {
    fn lock(&self) -> MutexGuard<'_, State> {
        self.state.lock().unwrap_or_else(|e| e.into_inner())
    }

    fn write_out(&self, bytes: &[u8]) {
        let mut out = self.out.lock().unwrap_or_else(|e| e.into_inner());
        // Nowhere to report a failing log output: the line is given up, as stderr's would be.
        let _ = out.write_all(bytes).and_then(|()| out.flush());
    }
}

/// The shared buffer of log lines (cloned freely; see the module comment).
#[derive(Clone)]
pub struct LogSink {
    shared: Arc<Shared>,
}

impl std::fmt::Debug for LogSink {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("LogSink").finish_non_exhaustive()
    }
}

/// Keeps the writer running; dropping it writes what is waiting and stops the writer.
#[derive(Debug)]
pub struct LogGuard {
    sink: LogSink,
    writer: Option<JoinHandle<()>>,
}

impl Drop for LogGuard {
    fn drop(&mut self) {
        self.sink.shared.lock().stopping = true;
        self.sink.shared.wake.notify_one();
        if let Some(writer) = self.writer.take() {
            let _ = writer.join();
        }
        // Should the writer have died, what it left is written here.
        let mut state = self.sink.shared.lock();
        state.closed = true;
        let rest = std::mem::take(&mut state.waiting);
        drop(state);
        if !rest.is_empty() {
            self.sink.shared.write_out(&rest);
        }
        self.sink.shared.room.notify_all();
    }
}

impl LogSink {
    /// A sink writing to `out` from a background thread named `thread_name`.
    pub fn start(
        out: impl Write + Send + 'static,
        thread_name: &str,
    ) -> std::io::Result<(LogSink, LogGuard)> {
        let shared = Arc::new(Shared {
            state: Mutex::new(State {
                waiting: Vec::with_capacity(GATHER_BYTES),
                writer_idle: false,
                stopping: false,
                closed: false,
            }),
            wake: Condvar::new(),
            room: Condvar::new(),
            out: Mutex::new(Box::new(out)),
        });
        let writer = {
            let shared = Arc::clone(&shared);
            std::thread::Builder::new()
                .name(thread_name.to_string())
                .spawn(move || write_lines(&shared))?
        };
        let sink = LogSink { shared };
        let guard = LogGuard {
            sink: sink.clone(),
            writer: Some(writer),
        };
        Ok((sink, guard))
    }

    /// Append whole lines (each ending in a newline).
    pub fn append(&self, lines: &[u8]) {
        let shared = &self.shared;
        let mut state = shared.lock();
        while state.waiting.len() >= HELD_BYTES && !state.closed {
            state = shared.room.wait(state).unwrap_or_else(|e| e.into_inner());
        }
        if state.closed {
            drop(state);
            shared.write_out(lines);
            return;
        }
        let was_empty = state.waiting.is_empty();
        state.waiting.extend_from_slice(lines);
        let wake = (was_empty && state.writer_idle)
            || (state.waiting.len() >= GATHER_BYTES
                && state.waiting.len() - lines.len() < GATHER_BYTES);
        drop(state);
        if wake {
            shared.wake.notify_one();
        }
    }

    /// Append the request line of one answered request (see the module comment).
    pub fn request(&self, line: &RequestLine<'_>) {
        LINE.with(|buffer| {
            let mut buffer = buffer.borrow_mut();
            buffer.clear();
            line.write(&mut buffer, SystemTime::now());
            self.append(buffer.as_bytes());
        });
    }
}

thread_local! {
    /// Each thread's request line, reused.
    static LINE: RefCell<String> = RefCell::new(String::with_capacity(512));
}

/// The writer thread: wait for a first line, let lines gather, write them in one call.
fn write_lines(shared: &Shared) {
    let mut spare = Vec::with_capacity(GATHER_BYTES);
    loop {
        let mut state = shared.lock();
        while state.waiting.is_empty() && !state.stopping {
            state.writer_idle = true;
            state = shared.wake.wait(state).unwrap_or_else(|e| e.into_inner());
        }
        state.writer_idle = false;
        if !state.stopping && state.waiting.len() < GATHER_BYTES {
            state = shared
                .wake
                .wait_timeout_while(state, GATHER_TIME, |s| {
                    s.waiting.len() < GATHER_BYTES && !s.stopping
                })
                .map_or_else(|e| e.into_inner().0, |(state, _)| state);
        }
        let stopping = state.stopping;
        std::mem::swap(&mut state.waiting, &mut spare);
        drop(state);
        shared.room.notify_all();
        if !spare.is_empty() {
            shared.write_out(&spare);
        }
        // A burst's buffer is not kept: the next one starts at the usual size.
        if spare.capacity() > 4 * GATHER_BYTES {
            spare = Vec::with_capacity(GATHER_BYTES);
        }
        spare.clear();
        if stopping && shared.lock().waiting.is_empty() {
            return;
        }
    }
}

/// The logging crate's writer: each event's formatted line is appended whole.
#[derive(Debug)]
pub struct SinkWriter<'a>(&'a LogSink);

impl Write for SinkWriter<'_> {
    fn write(&mut self, bytes: &[u8]) -> std::io::Result<usize> {
        self.0.append(bytes);
        Ok(bytes.len())
    }

    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

impl<'a> tracing_subscriber::fmt::MakeWriter<'a> for LogSink {
    type Writer = SinkWriter<'a>;

    fn make_writer(&'a self) -> SinkWriter<'a> {
        SinkWriter(self)
    }
}

/// The sink request lines go to, and whether they are wanted (the log filter's verdict on an
/// INFO event of [`REQUEST_TARGET`], taken once).
struct Installed {
    sink: LogSink,
    requests: bool,
}

static INSTALLED: OnceLock<Installed> = OnceLock::new();

/// Send this process's request lines to `sink` (when `requests`, else nowhere) instead of
/// through the logging crate; the first call wins. `ogive serve` calls it once its logging is
/// set up; without it (a library user, the tests' in-process servers) the middleware logs each
/// request as an ordinary event.
pub fn install(sink: LogSink, requests: bool) {
    let _ = INSTALLED.set(Installed { sink, requests });
}

/// Where request lines go: `None` for the logging crate, `Some(None)` for nowhere.
pub(crate) fn installed() -> Option<Option<&'static LogSink>> {
    INSTALLED
        .get()
        .map(|installed| installed.requests.then_some(&installed.sink))
}

/// The fields of one request line.
#[derive(Debug, Clone, Copy)]
pub struct RequestLine<'a> {
    /// The request id.
    pub request_id: &'a str,
    /// The route template (or `unmatched`).
    pub route: &'a str,
    /// The method label.
    pub method: &'a str,
    /// The status code answered.
    pub status: u16,
    /// Milliseconds from the request to its answer, to the microsecond.
    pub latency_ms: f64,
    /// The model that answered.
    pub model: Option<&'a str>,
    /// The version that answered.
    pub version: Option<&'a str>,
    /// The observations as sent (observation logging on).
    pub observations: Option<&'a str>,
}

impl RequestLine<'_> {
    /// Write the line, newline included, stamped `time`.
    pub fn write(&self, line: &mut String, time: SystemTime) {
        line.push_str("{\"timestamp\":\"");
        push_micros(line, time);
        line.push_str("\",\"level\":\"INFO\",\"message\":\"request\",\"request_id\":");
        push_str(line, self.request_id);
        line.push_str(",\"route\":");
        push_str(line, self.route);
        line.push_str(",\"method\":");
        push_str(line, self.method);
        line.push_str(",\"status\":");
        push_u64(line, u64::from(self.status));
        line.push_str(",\"latency_ms\":");
        push_f64(line, self.latency_ms);
        for (key, value) in [
            (",\"model\":", self.model),
            (",\"version\":", self.version),
            (",\"observations\":", self.observations),
        ] {
            if let Some(value) = value {
                line.push_str(key);
                push_str(line, value);
            }
        }
        line.push_str(",\"target\":\"");
        line.push_str(REQUEST_TARGET);
        line.push_str("\"}\n");
    }
}

thread_local! {
    /// The second last stamped and its text up to the seconds' digits: `YYYY-MM-DDTHH:MM:SS.`
    static SECOND: RefCell<(u64, String)> = const { RefCell::new((u64::MAX, String::new())) };
}

/// `time` to the microsecond, as `timestamp::write_rfc3339_micros` writes it, with the date and
/// time of day written once per second.
fn push_micros(line: &mut String, time: SystemTime) {
    let since_epoch = time.duration_since(UNIX_EPOCH).unwrap_or_default();
    let seconds = since_epoch.as_secs();
    SECOND.with(|second| {
        let mut second = second.borrow_mut();
        if second.0 != seconds {
            let mut text = String::with_capacity(32);
            let _ = crate::timestamp::write_rfc3339_micros(
                &mut text,
                UNIX_EPOCH + Duration::from_secs(seconds),
            );
            // "….000000Z" less the microseconds and the zone.
            text.truncate(text.len() - "000000Z".len());
            *second = (seconds, text);
        }
        line.push_str(&second.1);
    });
    let micros = since_epoch.subsec_micros();
    let mut digits = [b'0'; 6];
    let mut rest = micros;
    for digit in digits.iter_mut().rev() {
        *digit = b'0' + (rest % 10) as u8;
        rest /= 10;
    }
    // Six ASCII digits.
    line.push_str(std::str::from_utf8(&digits).unwrap_or("000000"));
}

#[cfg(test)]
pub(crate) mod tests {
    use std::io;

    use super::*;

    /// An output that keeps what is written to it (the log tests' stand-in for stderr), also
    /// as the logging crate's writer.
    #[derive(Clone, Default)]
    pub(crate) struct Captured(pub(crate) Arc<Mutex<Vec<u8>>>);

    impl<'a> tracing_subscriber::fmt::MakeWriter<'a> for Captured {
        type Writer = Captured;

        fn make_writer(&'a self) -> Captured {
            self.clone()
        }
    }

    impl io::Write for Captured {
        fn write(&mut self, bytes: &[u8]) -> io::Result<usize> {
            self.0
                .lock()
                .expect("not poisoned")
                .extend_from_slice(bytes);
            Ok(bytes.len())
        }

        fn flush(&mut self) -> io::Result<()> {
            Ok(())
        }
    }

    fn text(captured: &Captured) -> String {
        String::from_utf8(captured.0.lock().expect("not poisoned").clone()).expect("UTF-8")
    }

    #[test]
    fn the_microsecond_stamp_is_the_formatters_stamp() {
        for nanos in [
            0u64,
            1_000,
            999_999_999,
            1_767_225_600_125_250_000,
            1_767_225_599_999_999_999,
            4_107_542_400_000_001_000,
        ] {
            let time = UNIX_EPOCH + Duration::from_nanos(nanos);
            let mut ours = String::new();
            push_micros(&mut ours, time);
            let mut theirs = String::new();
            crate::timestamp::write_rfc3339_micros(&mut theirs, time).expect("written");
            assert_eq!(format!("{ours}Z"), theirs, "{nanos}");
        }
    }

    /// Reference: the logging crate's path this line replaces (the middleware's event through
    /// the `serve` formatter); apart from the timestamp the bytes must agree.
    #[test]
    fn the_request_line_is_the_events_line() {
        let cases = [
            RequestLine {
                request_id: "id-1",
                route: "/models/{name}/probability",
                method: "POST",
                status: 200,
                latency_ms: 0.12,
                model: Some("lease \"test\"\n"),
                version: Some("2026-01"),
                observations: Some("{\"x\":1.5}"),
            },
            RequestLine {
                request_id: "8f0c",
                route: "unmatched",
                method: "OTHER",
                status: 404,
                latency_ms: 17.0,
                model: None,
                version: None,
                observations: None,
            },
        ];
        for case in cases {
            let mut ours = String::new();
            case.write(&mut ours, SystemTime::now());
            let lines = Captured::default();
            let subscriber = tracing_subscriber::fmt()
                .with_writer(lines.clone())
                .event_format(crate::cli::log_line::JsonLines)
                .finish();
            tracing::subscriber::with_default(subscriber, || {
                tracing::info!(
                    target: "ogive::service::middleware",
                    request_id = case.request_id,
                    route = case.route,
                    method = case.method,
                    status = case.status,
                    latency_ms = case.latency_ms,
                    model = case.model,
                    version = case.version,
                    observations = case.observations,
                    "request"
                );
            });
            let theirs = text(&lines);
            let without_time = |line: &str| {
                line.split_once("\",\"level\"")
                    .map(|(_, rest)| rest.to_string())
            };
            assert_eq!(without_time(&ours), without_time(&theirs), "{case:?}");
            assert!(ours.ends_with('\n') && ours.matches('\n').count() == 1);
        }
    }

    #[test]
    fn every_line_is_written_once_in_order_and_the_guard_writes_the_rest() {
        let captured = Captured::default();
        let (sink, guard) = LogSink::start(captured.clone(), "test-log").expect("started");
        let threads: Vec<_> = (0..4)
            .map(|t| {
                let sink = sink.clone();
                std::thread::spawn(move || {
                    for i in 0..2_000 {
                        sink.append(format!("{t} {i}\n").as_bytes());
                    }
                })
            })
            .collect();
        for thread in threads {
            thread.join().expect("joined");
        }
        drop(guard);
        sink.append(b"after the end\n");
        let text = text(&captured);
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines.len(), 4 * 2_000 + 1);
        assert_eq!(lines.last(), Some(&"after the end"));
        for t in 0..4 {
            let mine: Vec<usize> = lines
                .iter()
                .filter_map(|l| l.strip_prefix(&format!("{t} ")))
                .map(|i| i.parse().expect("a number"))
                .collect();
            assert_eq!(mine, (0..2_000).collect::<Vec<_>>(), "thread {t}");
        }
    }

    /// An output that takes nothing until it is opened, as a full pipe.
    struct Gate {
        open: Arc<(Mutex<bool>, Condvar)>,
        out: Captured,
    }

    impl io::Write for Gate {
        fn write(&mut self, bytes: &[u8]) -> io::Result<usize> {
            let (open, opened) = &*self.open;
            let mut is_open = open.lock().expect("not poisoned");
            while !*is_open {
                is_open = opened.wait(is_open).expect("not poisoned");
            }
            self.out.write(bytes)
        }

        fn flush(&mut self) -> io::Result<()> {
            Ok(())
        }
    }

    #[test]
    fn a_stalled_output_holds_appenders_back_without_losing_lines() {
        let open = Arc::new((Mutex::new(false), Condvar::new()));
        let captured = Captured::default();
        let gate = Gate {
            open: Arc::clone(&open),
            out: captured.clone(),
        };
        let (sink, guard) = LogSink::start(gate, "test-log").expect("started");
        let line = format!("{}\n", "x".repeat(1023));
        let count = 3 * HELD_BYTES / line.len();
        let appender = {
            let sink = sink.clone();
            let line = line.clone();
            std::thread::spawn(move || {
                for _ in 0..count {
                    sink.append(line.as_bytes());
                }
            })
        };
        std::thread::sleep(Duration::from_millis(200));
        assert!(
            !appender.is_finished(),
            "the appender must wait while the output takes nothing"
        );
        assert!(sink.shared.lock().waiting.len() <= HELD_BYTES + line.len());
        *open.0.lock().expect("not poisoned") = true;
        open.1.notify_all();
        appender.join().expect("joined");
        drop(guard);
        assert_eq!(text(&captured).len(), count * line.len());
    }
}
