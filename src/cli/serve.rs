//! `ogive serve`: map the flags to a [`Config`] and run the [`Application`] it describes
//! (the model directory loaded and followed, the public listener and, with an admin token, the
//! admin listener), print their addresses and an example request, and serve until SIGTERM or
//! SIGINT (then drain and stop both).
//!
//! Every flag can also be set from the `OGIVE_…` variable named in its help; the admin token
//! itself can be given as `OGIVE_ADMIN_TOKEN` instead of a file. Without a token the admin
//! listener does not start, and the startup message says so.

use std::net::SocketAddr;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::Arc;
use std::time::Duration;

use crate::monitoring::monitor::MonitorSettings;
use crate::monitoring::shadow::Share;
use crate::receipt::{parse_max_age, ReceiptKeys};
use crate::service::admin::auth::{DEFAULT_LABEL, TOKEN_ENV};
use crate::service::admin::AdminToken;
use crate::service::cors::{parse_origin, CorsOrigins};
use crate::service::example::example_curl;
use crate::service::{AdminConfig, Application, Config, Limits, Monitoring, Settings};

/// Arguments of `ogive serve`.
#[derive(Debug, clap::Args)]
pub struct ServeArgs {
    /// The model directory: NAME/live and NAME/versions/VERSION.json per model.
    #[arg(
        long,
        env = "OGIVE_MODELS",
        default_value = "model-files",
        value_name = "DIR"
    )]
    pub models: PathBuf,
    /// Address of the public listener.
    #[arg(
        long,
        env = "OGIVE_LISTEN",
        default_value = "127.0.0.1:8080",
        value_name = "ADDR",
        value_parser = parse_address
    )]
    pub listen: SocketAddr,
    /// Address of the admin listener (loopback by default).
    #[arg(
        long,
        env = "OGIVE_ADMIN_LISTEN",
        default_value = "127.0.0.1:8081",
        value_name = "ADDR",
        value_parser = parse_address
    )]
    pub admin_listen: SocketAddr,
    /// File holding the admin bearer token (one trailing newline is ignored); or set
    /// OGIVE_ADMIN_TOKEN to the token itself. Without either, no admin listener starts.
    #[arg(long, env = "OGIVE_ADMIN_TOKEN_FILE", value_name = "FILE")]
    pub admin_token_file: Option<PathBuf>,
    /// Who the admin token stands for in the model history (recorded as admin:LABEL).
    #[arg(long, env = "OGIVE_ADMIN_TOKEN_LABEL", default_value = DEFAULT_LABEL, value_name = "LABEL")]
    pub admin_token_label: String,
    /// Share of a shadowed model's observations also scored by its shadow, from 0 to 1.
    #[arg(
        long,
        env = "OGIVE_SHADOW_SHARE",
        default_value = "1",
        value_name = "SHARE"
    )]
    pub shadow_share: Share,
    /// Worker threads (0: one per CPU core).
    #[arg(long, env = "OGIVE_WORKERS", default_value_t = 0)]
    pub workers: usize,
    /// Most observations in one batch.
    #[arg(long, env = "OGIVE_MAX_BATCH", default_value_t = Limits::default().max_batch)]
    pub max_batch: usize,
    /// Largest request body, in bytes.
    #[arg(long, env = "OGIVE_MAX_BODY_BYTES", default_value_t = Limits::default().max_body_bytes)]
    pub max_body_bytes: usize,
    /// Largest total size of request headers, in bytes.
    #[arg(long, env = "OGIVE_MAX_HEADER_BYTES", default_value_t = Limits::default().max_header_bytes)]
    pub max_header_bytes: usize,
    /// Most points on one curve.
    #[arg(long, env = "OGIVE_MAX_CURVE_POINTS", default_value_t = Limits::default().max_curve_points)]
    pub max_curve_points: usize,
    /// Most scoring jobs running at once off the I/O workers (0: one per CPU core).
    #[arg(long, env = "OGIVE_COMPUTE_THREADS", default_value_t = Limits::default().compute_threads)]
    pub compute_threads: usize,
    /// Most work one request may ask for, in observations × terms².
    #[arg(long, env = "OGIVE_MAX_WORK_UNITS", default_value_t = Limits::default().max_work_units)]
    pub max_work_units: u64,
    /// Most observations being scored or written out at once (beyond: 503 with Retry-After).
    #[arg(long, env = "OGIVE_MAX_INFLIGHT_OBSERVATIONS", default_value_t = Limits::default().max_inflight_observations)]
    pub max_inflight_observations: usize,
    /// Most request-body bytes being read at once (beyond: 503 with Retry-After).
    #[arg(long, env = "OGIVE_MAX_INFLIGHT_BODY_BYTES", default_value_t = Limits::default().max_inflight_body_bytes)]
    pub max_inflight_body_bytes: usize,
    /// Most connections the public listener holds at once; more wait in the kernel's accept
    /// queue until one closes.
    #[arg(long, env = "OGIVE_MAX_CONNECTIONS", default_value_t = Limits::default().max_connections)]
    pub max_connections: usize,
    /// Time a connection may go without the client taking any of its answer before it is
    /// abandoned, in milliseconds (Linux).
    #[arg(long, env = "OGIVE_WRITE_STALL_TIMEOUT_MS", default_value_t = Limits::default().write_stall_timeout_ms)]
    pub write_stall_timeout_ms: u64,
    /// Time a client has to send the request head, in milliseconds.
    #[arg(long, env = "OGIVE_CLIENT_REQUEST_TIMEOUT_MS", default_value_t = Limits::default().client_request_timeout_ms)]
    pub client_request_timeout_ms: u64,
    /// Time a client has to send the request body once its head has arrived, in milliseconds.
    #[arg(long, env = "OGIVE_BODY_TIMEOUT_MS", default_value_t = Limits::default().body_timeout_ms)]
    pub body_timeout_ms: u64,
    /// Time an idle keep-alive connection stays open, in milliseconds.
    #[arg(long, env = "OGIVE_KEEP_ALIVE_MS", default_value_t = Limits::default().keep_alive_ms)]
    pub keep_alive_ms: u64,
    /// Time a client has to acknowledge a closed connection, in milliseconds.
    #[arg(long, env = "OGIVE_CLIENT_DISCONNECT_TIMEOUT_MS", default_value_t = Limits::default().client_disconnect_timeout_ms)]
    pub client_disconnect_timeout_ms: u64,
    /// After SIGTERM, how long to keep accepting while readiness is 503, in milliseconds.
    #[arg(long, env = "OGIVE_DRAIN_DELAY_MS", default_value_t = Settings::default().drain_delay_ms)]
    pub drain_delay_ms: u64,
    /// After SIGTERM, the longest wait for in-flight requests before exiting, in milliseconds.
    #[arg(long, env = "OGIVE_SHUTDOWN_TIMEOUT_MS", default_value_t = Settings::default().shutdown_timeout_ms)]
    pub shutdown_timeout_ms: u64,
    /// An origin whose browser pages may call the public listener (CORS), written as browsers
    /// send it: scheme://host[:port], e.g. https://dashboard.example.org. Repeatable, or
    /// comma-separated; none by default, and never '*'.
    #[arg(long, env = "OGIVE_CORS_ORIGIN", value_name = "ORIGIN",
          value_parser = parse_origin, value_delimiter = ',')]
    pub cors_origin: Vec<String>,
    /// Log each request's covariate values (they may be personal data; off by default).
    #[arg(long, env = "OGIVE_LOG_OBSERVATIONS")]
    pub log_observations: bool,
    /// Drift, outcome and calibration monitoring.
    #[arg(long, env = "OGIVE_MONITORING", default_value = "on", value_name = "on|off",
          value_parser = parse_switch, action = clap::ArgAction::Set)]
    pub monitoring: bool,
    /// Observations per model version in each drift window.
    #[arg(long, env = "OGIVE_DRIFT_WINDOW", default_value_t = MonitorSettings::default().drift_window)]
    pub drift_window: usize,
    /// Outcomes per model version in each calibration window.
    #[arg(long, env = "OGIVE_CALIBRATION_WINDOW", default_value_t = MonitorSettings::default().calibration_window)]
    pub calibration_window: usize,
    /// File of receipt keys, one a line (at least 32 bytes each, mode 600): the first seals
    /// receipts, all open them. Without it, an ephemeral key is made and receipts stop opening
    /// when the process ends.
    #[arg(long, env = "OGIVE_RECEIPT_KEY_FILE", value_name = "FILE")]
    pub receipt_key_file: Option<PathBuf>,
    /// The oldest receipt whose outcome is taken: a whole number and d, h, m or s.
    #[arg(long, env = "OGIVE_RECEIPT_MAX_AGE", default_value = "400d", value_name = "AGE",
          value_parser = parse_max_age)]
    pub receipt_max_age: Duration,
    /// Receipt ids this process remembers to refuse a repeated outcome (oldest forgotten first).
    #[arg(long, env = "OGIVE_SEEN_RECEIPTS", default_value_t = MonitorSettings::default().seen_receipts)]
    pub seen_receipts: usize,
}

/// The receipt keys of `file`, or an ephemeral key with one warning that its receipts will not
/// open after a restart or on another replica.
/// `on` or `off` (and, for settings written elsewhere, true/false, yes/no, 1/0).
fn parse_switch(s: &str) -> Result<bool, String> {
    match s.trim().to_ascii_lowercase().as_str() {
        "on" | "true" | "yes" | "1" => Ok(true),
        "off" | "false" | "no" | "0" => Ok(false),
        _ => Err(format!("'{s}' is neither on nor off")),
    }
}

/// A listening address, IP:PORT; the error shows what one looks like.
fn parse_address(s: &str) -> Result<SocketAddr, String> {
    s.trim().parse().map_err(|_| {
        format!(
            "'{s}' is not an address to listen on: write IP:PORT, e.g. 127.0.0.1:8080 (this \
             machine only), 0.0.0.0:8080 (every IPv4 interface) or [::1]:8080; a host name \
             such as localhost is not accepted"
        )
    })
}

fn receipt_keys(file: Option<&std::path::Path>) -> anyhow::Result<ReceiptKeys> {
    match file {
        Some(path) => {
            let keys = ReceiptKeys::from_file(path)?;
            tracing::info!(file = %path.display(), keys = keys.len(), "receipt keys loaded");
            Ok(keys)
        }
        None => {
            let keys = ReceiptKeys::ephemeral()?;
            tracing::warn!(
                "no receipt key file (--receipt-key-file or OGIVE_RECEIPT_KEY_FILE): receipts are \
                 sealed with an ephemeral key and will not verify after a restart or on another replica"
            );
            Ok(keys)
        }
    }
}

impl ServeArgs {
    /// The listener settings these arguments describe.
    pub fn settings(&self) -> Settings {
        Settings {
            listen: self.listen,
            workers: self.workers,
            limits: Limits {
                max_batch: self.max_batch,
                max_body_bytes: self.max_body_bytes,
                max_header_bytes: self.max_header_bytes,
                max_curve_points: self.max_curve_points.max(2),
                client_request_timeout_ms: self.client_request_timeout_ms,
                body_timeout_ms: self.body_timeout_ms,
                keep_alive_ms: self.keep_alive_ms,
                client_disconnect_timeout_ms: self.client_disconnect_timeout_ms,
                compute_threads: self.compute_threads,
                max_work_units: self.max_work_units,
                max_inflight_observations: self.max_inflight_observations,
                max_inflight_body_bytes: self.max_inflight_body_bytes,
                max_connections: self.max_connections,
                write_stall_timeout_ms: self.write_stall_timeout_ms,
            },
            drain_delay_ms: self.drain_delay_ms,
            shutdown_timeout_ms: self.shutdown_timeout_ms,
            log_observations: self.log_observations,
            cors_origins: CorsOrigins::new(&self.cors_origin)
                .expect("each origin was checked when the arguments were parsed"),
        }
    }

    /// The application these arguments describe (reading the admin token and the receipt
    /// keys they name).
    pub fn config(&self) -> anyhow::Result<Config> {
        let token_variable = std::env::var_os(TOKEN_ENV).map(|v| v.into_encoded_bytes());
        let token = AdminToken::configured(
            self.admin_token_file.as_deref(),
            token_variable.as_deref(),
            &self.admin_token_label,
        )?;
        let monitoring = if self.monitoring {
            Some(Monitoring {
                windows: MonitorSettings {
                    drift_window: self.drift_window,
                    calibration_window: self.calibration_window,
                    seen_receipts: self.seen_receipts,
                    receipt_max_age: self.receipt_max_age,
                    ..MonitorSettings::default()
                },
                keys: Arc::new(receipt_keys(self.receipt_key_file.as_deref())?),
            })
        } else {
            None
        };
        Ok(Config {
            admin: token.map(|token| AdminConfig {
                listen: self.admin_listen,
                token,
            }),
            monitoring,
            shadow_share: self.shadow_share,
            stop_on_signals: true,
            ..Config::new(self.models.clone(), self.settings())
        })
    }
}

fn log_panics() {
    std::panic::set_hook(Box::new(|info| {
        let location = info
            .location()
            .map(|l| format!("{}:{}", l.file(), l.line()))
            .unwrap_or_default();
        let message = info
            .payload()
            .downcast_ref::<&str>()
            .map(|s| s.to_string())
            .or_else(|| info.payload().downcast_ref::<String>().cloned())
            .unwrap_or_default();
        tracing::error!(panic = %message, location = %location, "panic");
    }));
}

/// Run `ogive serve`.
pub fn run(args: ServeArgs) -> anyhow::Result<ExitCode> {
    log_panics();
    let application = Application::build(args.config()?)?;
    let base_url = format!("http://{}", application.public_addr());
    println!("ogive serving on {base_url}");
    let snapshot = application.state().registry.snapshot();
    if let Some(entry) = snapshot.models.values().next() {
        println!("try:\n  {}", example_curl(&entry.live, &base_url));
    }
    match application.admin_addr() {
        Some(admin_addr) => println!("ogive admin on http://{admin_addr}"),
        None => println!(
            "ogive admin off: no admin token is configured (--admin-token-file or OGIVE_ADMIN_TOKEN)"
        ),
    }
    application.run_until_stopped()?;
    Ok(ExitCode::SUCCESS)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_listen_error_shows_an_example_address() {
        let error = parse_address("localhost:8080").expect_err("a host name");
        assert!(
            error.contains("127.0.0.1:8080") && error.contains("localhost"),
            "{error}"
        );
        assert_eq!(
            parse_address("0.0.0.0:80"),
            Ok("0.0.0.0:80".parse().expect("address"))
        );
    }

    #[test]
    fn serve_help_spells_monitoring_one_way() {
        use clap::CommandFactory;
        let mut command = crate::cli::Cli::command();
        let serve = command.find_subcommand_mut("serve").expect("serve");
        let help = serve.render_long_help().to_string();
        assert!(help.contains("--monitoring <on|off>"), "{help}");
        assert!(!help.contains("possible values: true, false"), "{help}");
    }

    #[test]
    fn cors_origins_are_listed_one_by_one_and_never_as_a_wildcard() {
        use clap::Parser;
        let parse = |args: &[&str]| {
            let mut all = vec!["ogive", "serve"];
            all.extend_from_slice(args);
            crate::cli::Cli::try_parse_from(all)
        };
        let refused = parse(&["--cors-origin", "*"]).expect_err("a wildcard");
        assert!(
            refused.to_string().contains("list each origin"),
            "{refused}"
        );
        let refused = parse(&["--cors-origin", "https://a.example/app"]).expect_err("a path");
        assert!(
            refused.to_string().contains("scheme, host and port only"),
            "{refused}"
        );
        let parsed = parse(&[
            "--cors-origin",
            "https://a.example,http://127.0.0.1:3000",
            "--cors-origin",
            "https://B.example",
        ])
        .expect("origins");
        let crate::cli::Command::Serve(args) = parsed.command else {
            panic!("not serve");
        };
        let settings = args.settings();
        assert_eq!(
            settings.cors_origins.origins(),
            [
                "https://a.example",
                "http://127.0.0.1:3000",
                "https://b.example"
            ]
        );
        assert!(parse(&[]).is_ok_and(|c| match c.command {
            crate::cli::Command::Serve(args) => args.settings().cors_origins.is_empty(),
            _ => false,
        }));
    }

    #[test]
    fn monitoring_is_switched_on_or_off() {
        assert_eq!(parse_switch("on"), Ok(true));
        assert_eq!(parse_switch("OFF"), Ok(false));
        assert_eq!(parse_switch("false"), Ok(false));
        assert!(parse_switch("maybe").is_err());
    }
}
