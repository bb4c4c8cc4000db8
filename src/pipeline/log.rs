//! Run logs: readable lines on a terminal, JSON lines (one event per line) for batch systems,
//! so a scheduler's log file can be parsed without scraping prose.
use std::io::{IsTerminal, Write};
use std::time::Instant;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LogFormat {
    Human,
    Json,
}

impl LogFormat {
    /// "human", "json" or "auto" (JSON unless stderr is a terminal).
    pub fn parse(s: &str) -> crate::Result<Self> {
        match s {
            "human" => Ok(LogFormat::Human),
            "json" => Ok(LogFormat::Json),
            "auto" => Ok(if std::io::stderr().is_terminal() {
                LogFormat::Human
            } else {
                LogFormat::Json
            }),
            _ => Err(crate::Error::input(format!(
                "--log-format {s}: expected auto, human or json"
            ))),
        }
    }
}

/// Writes events to stderr.
pub struct Logger {
    pub format: LogFormat,
    t0: Instant,
}

impl Logger {
    pub fn new(format: LogFormat) -> Self {
        Logger {
            format,
            t0: Instant::now(),
        }
    }

    /// One event. `extra` (a JSON object) adds fields to the JSON line; humans see `message`.
    pub fn event(&self, stage: &str, event: &str, message: &str, extra: serde_json::Value) {
        let t = self.t0.elapsed().as_secs_f64();
        let line = match self.format {
            LogFormat::Human => format!("[{t:8.2}s] {stage}: {message}"),
            LogFormat::Json => {
                let mut v = serde_json::json!({
                    "elapsed_s": (t * 1000.0).round() / 1000.0,
                    "stage": stage,
                    "event": event,
                    "message": message,
                });
                if let (Some(o), serde_json::Value::Object(e)) = (v.as_object_mut(), extra) {
                    for (k, x) in e {
                        o.entry(k).or_insert(x);
                    }
                }
                v.to_string()
            }
        };
        let _ = writeln!(std::io::stderr().lock(), "{line}");
    }
}
