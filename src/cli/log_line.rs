//! The JSON lines `ogive serve` logs, one object per event, written by hand into the line
//! buffer the logging layer hands over:
//!
//! ```text
//! {"timestamp":"2026-03-01T09:30:00.125250Z","level":"INFO","message":"request",<fields>,"target":"ogive::service::middleware"}
//! ```
//!
//! Fields appear in the order the event names them; text and anything logged with `?` or `%`
//! as JSON strings, numbers and booleans as JSON numbers and booleans (a double that is not
//! finite as `null`). Events from the `log` crate (actix's) carry their own target. ogive opens
//! no spans, so a line names none.
//!
//! Why by hand: the service writes one such line per request, and the general JSON formatter
//! of the logging crate (a serializer over an adaptor that checks each fragment's UTF-8, a
//! timestamp through `Display`) took about a tenth of the server's CPU per request in the load
//! benchmark. The bytes are the same as that formatter's with events flattened.

use std::fmt;
use std::time::SystemTime;

use tracing::field::{Field, Visit};
use tracing::{Event, Subscriber};
use tracing_log::NormalizeEvent;
use tracing_subscriber::fmt::format::Writer;
use tracing_subscriber::fmt::{FmtContext, FormatEvent, FormatFields};
use tracing_subscriber::registry::LookupSpan;

use crate::json_text::{push_f64, push_i64, push_str, push_u64};
use crate::timestamp::write_rfc3339_micros;

/// The event formatter of `ogive serve`'s log (see the module comment).
#[derive(Debug, Clone, Copy, Default)]
pub struct JsonLines;

/// Writes each field as `,"name":value` into the line.
struct Fields<'a> {
    line: &'a mut String,
}

impl Fields<'_> {
    fn key(&mut self, field: &Field) {
        self.line.push(',');
        push_str(self.line, field.name());
        self.line.push(':');
    }
}

impl Visit for Fields<'_> {
    fn record_f64(&mut self, field: &Field, value: f64) {
        self.key(field);
        push_f64(self.line, value);
    }

    fn record_i64(&mut self, field: &Field, value: i64) {
        self.key(field);
        push_i64(self.line, value);
    }

    fn record_u64(&mut self, field: &Field, value: u64) {
        self.key(field);
        push_u64(self.line, value);
    }

    fn record_bool(&mut self, field: &Field, value: bool) {
        self.key(field);
        self.line.push_str(if value { "true" } else { "false" });
    }

    fn record_str(&mut self, field: &Field, value: &str) {
        self.key(field);
        push_str(self.line, value);
    }

    fn record_debug(&mut self, field: &Field, value: &dyn fmt::Debug) {
        self.key(field);
        push_str(self.line, &format!("{value:?}"));
    }
}

impl<S, N> FormatEvent<S, N> for JsonLines
where
    S: Subscriber + for<'lookup> LookupSpan<'lookup>,
    N: for<'writer> FormatFields<'writer> + 'static,
{
    fn format_event(
        &self,
        _ctx: &FmtContext<'_, S, N>,
        mut writer: Writer<'_>,
        event: &Event<'_>,
    ) -> fmt::Result {
        let normalized = event.normalized_metadata();
        let meta = normalized.as_ref().unwrap_or_else(|| event.metadata());
        let mut line = String::with_capacity(320);
        line.push_str("{\"timestamp\":\"");
        write_rfc3339_micros(&mut line, SystemTime::now())?;
        line.push_str("\",\"level\":\"");
        line.push_str(meta.level().as_str());
        line.push('"');
        event.record(&mut Fields { line: &mut line });
        line.push_str(",\"target\":");
        push_str(&mut line, meta.target());
        line.push_str("}\n");
        writer.write_str(&line)
    }
}

#[cfg(test)]
mod tests {
    use serde_json::{json, Value as Json};

    use super::*;
    use crate::service::access_log::tests::Captured;

    fn lines_of(log: impl FnOnce()) -> Vec<String> {
        let captured = Captured::default();
        let subscriber = tracing_subscriber::fmt()
            .with_writer(captured.clone())
            .event_format(JsonLines)
            .finish();
        tracing::subscriber::with_default(subscriber, log);
        let bytes = captured.0.lock().expect("not poisoned").clone();
        String::from_utf8(bytes)
            .expect("UTF-8")
            .lines()
            .map(str::to_string)
            .collect()
    }

    #[test]
    fn a_request_line_holds_every_field_in_order_with_its_json_type() {
        let lines = lines_of(|| {
            tracing::info!(
                request_id = "id-1",
                route = "/models/{name}/probability",
                status = 200u16,
                latency_ms = 0.017,
                ratio = f64::NAN,
                negative = -3i64,
                draining = false,
                model = Some("lease \"test\"\n"),
                version = None::<&str>,
                shown = ?vec![1, 2],
                "request"
            );
        });
        assert_eq!(lines.len(), 1);
        let line: Json = serde_json::from_str(&lines[0]).expect("a JSON line");
        let keys: Vec<&str> = line
            .as_object()
            .expect("an object")
            .keys()
            .map(String::as_str)
            .collect();
        assert_eq!(
            keys,
            [
                "timestamp",
                "level",
                "message",
                "request_id",
                "route",
                "status",
                "latency_ms",
                "ratio",
                "negative",
                "draining",
                "model",
                "shown",
                "target"
            ]
        );
        assert_eq!(line["level"], json!("INFO"));
        assert_eq!(line["message"], json!("request"));
        assert_eq!(line["status"], json!(200));
        assert_eq!(line["latency_ms"], json!(0.017));
        assert_eq!(line["ratio"], Json::Null);
        assert_eq!(line["negative"], json!(-3));
        assert_eq!(line["draining"], json!(false));
        assert_eq!(line["model"], json!("lease \"test\"\n"));
        assert_eq!(line["shown"], json!("[1, 2]"));
        assert_eq!(line["target"], json!(module_path!()));
        let timestamp = line["timestamp"].as_str().expect("text");
        assert_eq!(
            timestamp.len(),
            "2026-03-01T09:30:00.125250Z".len(),
            "{timestamp}"
        );
        assert!(timestamp.ends_with('Z') && timestamp.as_bytes()[10] == b'T');
    }

    /// Reference: the logging crate's own JSON formatter with events flattened, the format these
    /// lines replace; apart from the timestamp the bytes must agree.
    #[test]
    fn the_line_is_the_general_formatters_line() {
        let event = || {
            tracing::warn!(
                model = "m",
                count = 3u64,
                share = 0.25,
                "loaded with a warning"
            );
        };
        let ours = lines_of(event);
        let captured = Captured::default();
        let subscriber = tracing_subscriber::fmt()
            .with_writer(captured.clone())
            .json()
            .flatten_event(true)
            .with_current_span(false)
            .finish();
        tracing::subscriber::with_default(subscriber, event);
        let theirs =
            String::from_utf8(captured.0.lock().expect("not poisoned").clone()).expect("UTF-8");
        let without_time = |line: &str| {
            line.split_once("\",\"level\"")
                .map(|(_, rest)| rest.to_string())
        };
        assert_eq!(
            without_time(&ours[0]),
            without_time(theirs.lines().next().expect("a line"))
        );
    }
}
