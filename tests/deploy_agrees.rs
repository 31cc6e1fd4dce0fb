//! The deployment files agree with the binary they deploy.
//!
//! The Kubernetes manifests, the systemd unit and the Prometheus files restate facts that the
//! code owns: the health routes, the listen ports, the drain and shutdown times, the worker
//! count, the flags and `OGIVE_…` variables each subcommand reads, the metric names. Nothing
//! else keeps the two in step, so this file reads the deployment files and checks each
//! restated fact against the code: flags and variables against the real command-line parser
//! (`ogive::cli::Cli`), routes and draining against a real `ogive serve` on loopback, metric
//! names against the metrics module's source.
//!
//! It does not validate the manifests' schema (`kubernetes-validate --strict` does that in
//! `.ci/deploy-checks.sh`) nor test the alert rules (`promtool test rules` does).

mod support;

use std::collections::BTreeSet;
use std::io::{BufRead, BufReader};
use std::net::SocketAddr;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::mpsc;
use std::time::{Duration, Instant};

use clap::{CommandFactory, Parser};
use ogive::cli::{Cli, Command as Subcommand};
use support::process::{free_port, status_of, wait_for_exit, Killed};
use yaml_rust2::{Yaml, YamlLoader};

const DEPLOYMENT: &str = "deploy/kubernetes/deployment.yaml";
const CONFIGMAP_DEPLOYMENT: &str = "deploy/kubernetes/configmap/deployment.yaml";
const SERVICE: &str = "deploy/kubernetes/service.yaml";
const NETWORK_POLICY: &str = "deploy/kubernetes/networkpolicy.yaml";
const SCORE_JOB: &str = "deploy/kubernetes/batch/score-job.yaml";
const SYSTEMD_UNIT: &str = "deploy/systemd/ogive.service";
const ALERT_RULES: &str = "deploy/prometheus/ogive-rules.yml";

/// Both ways of deploying the server, which must each satisfy every server check.
const SERVER_DEPLOYMENTS: [&str; 2] = [DEPLOYMENT, CONFIGMAP_DEPLOYMENT];

fn repo_path(relative: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(relative)
}

fn read_text(relative: &str) -> String {
    let path = repo_path(relative);
    std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()))
}

/// The one YAML document in a manifest file.
fn manifest(relative: &str) -> Yaml {
    let mut documents = YamlLoader::load_from_str(&read_text(relative))
        .unwrap_or_else(|e| panic!("{relative} is not YAML: {e}"));
    assert_eq!(documents.len(), 1, "{relative} should hold one document");
    documents.remove(0)
}

fn text<'a>(node: &'a Yaml, what: &str) -> &'a str {
    node.as_str()
        .unwrap_or_else(|| panic!("{what} should be a string, found {node:?}"))
}

fn integer(node: &Yaml, what: &str) -> i64 {
    node.as_i64()
        .unwrap_or_else(|| panic!("{what} should be an integer, found {node:?}"))
}

fn list<'a>(node: &'a Yaml, what: &str) -> &'a [Yaml] {
    node.as_vec()
        .unwrap_or_else(|| panic!("{what} should be a list, found {node:?}"))
}

/// The container of a pod template with this name.
fn container<'a>(pod_spec: &'a Yaml, name: &str) -> &'a Yaml {
    list(&pod_spec["containers"], "containers")
        .iter()
        .find(|c| c["name"].as_str() == Some(name))
        .unwrap_or_else(|| panic!("no container named {name}"))
}

fn pod_spec(workload: &Yaml) -> &Yaml {
    &workload["spec"]["template"]["spec"]
}

/// An environment variable's literal value, if the container sets one.
fn env_literal<'a>(container: &'a Yaml, name: &str) -> Option<&'a str> {
    env_entry(container, name).and_then(|entry| entry["value"].as_str())
}

fn env_entry<'a>(container: &'a Yaml, name: &str) -> Option<&'a Yaml> {
    container["env"]
        .as_vec()?
        .iter()
        .find(|entry| entry["name"].as_str() == Some(name))
}

fn env_names(container: &Yaml) -> Vec<String> {
    container["env"]
        .as_vec()
        .map(|entries| {
            entries
                .iter()
                .map(|entry| text(&entry["name"], "env name").to_string())
                .collect()
        })
        .unwrap_or_default()
}

/// A required millisecond setting from the environment, in seconds.
fn env_seconds(container: &Yaml, name: &str) -> f64 {
    let value = env_literal(container, name)
        .unwrap_or_else(|| panic!("{name} should be set explicitly, not left to a default"));
    let ms: u64 = value
        .parse()
        .unwrap_or_else(|e| panic!("{name}={value} is not milliseconds: {e}"));
    ms as f64 / 1000.0
}

fn container_port(container: &Yaml, port_name: &str) -> Option<i64> {
    container["ports"]
        .as_vec()?
        .iter()
        .find(|port| port["name"].as_str() == Some(port_name))
        .map(|port| integer(&port["containerPort"], "containerPort"))
}

fn listen_port(address: &str) -> i64 {
    let address: SocketAddr = address
        .parse()
        .unwrap_or_else(|e| panic!("{address} is not an address: {e}"));
    i64::from(address.port())
}

/// A CPU quantity in cores: "2", 2, "1.5" or "500m".
fn cpu_cores(quantity: &Yaml) -> f64 {
    if let Some(cores) = quantity.as_i64() {
        return cores as f64;
    }
    let text = text(quantity, "cpu quantity");
    match text.strip_suffix('m') {
        Some(millicores) => millicores.parse::<f64>().expect("millicores") / 1000.0,
        None => text.parse().expect("cores"),
    }
}

/// The `OGIVE_…` variables that a subcommand's flags read, from the real parser.
fn env_vars_of(subcommand: &str) -> BTreeSet<String> {
    let command = Cli::command();
    let sub = command
        .find_subcommand(subcommand)
        .unwrap_or_else(|| panic!("no subcommand {subcommand}"));
    sub.get_arguments()
        .filter_map(|arg| arg.get_env())
        .map(|name| name.to_string_lossy().into_owned())
        .collect()
}

fn string_args(node: &Yaml) -> Vec<String> {
    list(node, "args")
        .iter()
        .map(|arg| text(arg, "argument").to_string())
        .collect()
}

/// Parse a container's arguments as the image's entrypoint (`ogive`) would receive them.
fn parse_args(args: &[String]) -> Cli {
    Cli::try_parse_from(std::iter::once("ogive".to_string()).chain(args.iter().cloned()))
        .unwrap_or_else(|e| panic!("`ogive {}` does not parse:\n{e}", args.join(" ")))
}

#[test]
fn probes_use_the_health_routes_on_the_public_port() {
    for file in SERVER_DEPLOYMENTS {
        let deployment = manifest(file);
        let ogive = container(pod_spec(&deployment), "ogive");
        let expected = [
            ("startupProbe", "/livez"),
            ("livenessProbe", "/livez"),
            ("readinessProbe", "/readyz"),
        ];
        for (probe, path) in expected {
            let get = &ogive[probe]["httpGet"];
            assert_eq!(text(&get["path"], probe), path, "{file}: {probe}");
            assert_eq!(text(&get["port"], probe), "http", "{file}: {probe} port");
        }
        let listen = env_literal(ogive, "OGIVE_LISTEN").expect("OGIVE_LISTEN");
        assert_eq!(
            container_port(ogive, "http"),
            Some(listen_port(listen)),
            "{file}: the http containerPort is the port of OGIVE_LISTEN={listen}"
        );
    }
}

#[test]
fn admin_port_agrees_with_admin_listen_and_no_service_or_open_rule_exposes_it() {
    let deployment = manifest(DEPLOYMENT);
    let ogive = container(pod_spec(&deployment), "ogive");
    let admin_listen = env_literal(ogive, "OGIVE_ADMIN_LISTEN").expect("OGIVE_ADMIN_LISTEN");
    let admin_port = listen_port(admin_listen);
    assert_eq!(container_port(ogive, "admin"), Some(admin_port));
    assert!(
        env_literal(ogive, "OGIVE_ADMIN_TOKEN_FILE").is_some(),
        "the PVC deployment configures an admin token file"
    );

    let service = manifest(SERVICE);
    for port in list(&service["spec"]["ports"], "Service ports") {
        let target = &port["targetPort"];
        assert_ne!(
            target.as_str(),
            Some("admin"),
            "Service targets the admin port"
        );
        assert_ne!(
            target.as_i64(),
            Some(admin_port),
            "Service targets the admin port"
        );
        assert_ne!(
            integer(&port["port"], "port"),
            admin_port,
            "Service exposes the admin port number"
        );
    }

    // Every NetworkPolicy rule that admits the admin port names who may use it.
    let policy = manifest(NETWORK_POLICY);
    let mut admin_rules = 0;
    for rule in list(&policy["spec"]["ingress"], "ingress rules") {
        let ports = list(&rule["ports"], "ingress ports");
        if ports.iter().any(|p| p["port"].as_i64() == Some(admin_port)) {
            admin_rules += 1;
            assert!(
                rule["from"].as_vec().is_some_and(|from| !from.is_empty()),
                "an ingress rule opens the admin port to everyone: {rule:?}"
            );
        }
    }
    assert_eq!(admin_rules, 1, "one ingress rule admits the admin port");

    // The ConfigMap variant has read-only models and no admin listener reachable from outside.
    let variant = manifest(CONFIGMAP_DEPLOYMENT);
    let ogive = container(pod_spec(&variant), "ogive");
    assert_eq!(container_port(ogive, "admin"), None);
    assert_eq!(env_literal(ogive, "OGIVE_ADMIN_TOKEN_FILE"), None);
    if let Some(address) = env_literal(ogive, "OGIVE_ADMIN_LISTEN") {
        let address: SocketAddr = address.parse().expect("admin address");
        assert!(address.ip().is_loopback(), "{address} is not loopback");
    }
}

#[test]
fn grace_period_covers_pre_stop_drain_and_shutdown() {
    for file in SERVER_DEPLOYMENTS {
        let deployment = manifest(file);
        let spec = pod_spec(&deployment);
        let ogive = container(spec, "ogive");
        let pre_stop = integer(
            &ogive["lifecycle"]["preStop"]["sleep"]["seconds"],
            "preStop sleep",
        ) as f64;
        let drain = env_seconds(ogive, "OGIVE_DRAIN_DELAY_MS");
        let shutdown = env_seconds(ogive, "OGIVE_SHUTDOWN_TIMEOUT_MS");
        let grace = integer(
            &spec["terminationGracePeriodSeconds"],
            "terminationGracePeriodSeconds",
        ) as f64;
        // Strictly more, so that the kubelet's SIGKILL cannot land as the shutdown timeout ends.
        assert!(
            grace > pre_stop + drain + shutdown,
            "{file}: grace {grace} s is not more than preStop {pre_stop} + drain {drain} + \
             shutdown {shutdown}"
        );
    }

    // systemd has no preStop: SIGTERM comes first, and TimeoutStopSec must cover the rest.
    let unit = read_text(SYSTEMD_UNIT);
    let setting = |key: &str| -> String {
        unit.lines()
            .find_map(|line| line.strip_prefix(key))
            .unwrap_or_else(|| panic!("the unit sets no {key}"))
            .trim()
            .to_string()
    };
    let ms = |name: &str| -> f64 {
        setting(&format!("Environment={name}="))
            .parse::<f64>()
            .expect("milliseconds")
            / 1000.0
    };
    let stop: f64 = setting("TimeoutStopSec=").parse().expect("seconds");
    let drain = ms("OGIVE_DRAIN_DELAY_MS");
    let shutdown = ms("OGIVE_SHUTDOWN_TIMEOUT_MS");
    assert!(
        stop > drain + shutdown,
        "TimeoutStopSec {stop} is not more than drain {drain} + shutdown {shutdown}"
    );
}

#[test]
fn workers_follow_the_cpu_limit() {
    for file in SERVER_DEPLOYMENTS {
        let deployment = manifest(file);
        let ogive = container(pod_spec(&deployment), "ogive");
        let limit = cpu_cores(&ogive["resources"]["limits"]["cpu"]);
        let entry = env_entry(ogive, "OGIVE_WORKERS").expect("OGIVE_WORKERS is set");
        if let Some(workers) = entry["value"].as_str() {
            let workers: f64 = workers.parse().expect("a worker count");
            assert_eq!(
                workers, limit,
                "{file}: OGIVE_WORKERS against the CPU limit"
            );
        } else {
            // Read from the limit by the downward API, which rounds up to whole cores with
            // divisor 1: equal to the limit only when the limit is whole.
            let field = &entry["valueFrom"]["resourceFieldRef"];
            assert_eq!(text(&field["resource"], "resource"), "limits.cpu", "{file}");
            assert_eq!(text(&field["containerName"], "containerName"), "ogive");
            assert_eq!(text(&field["divisor"], "divisor"), "1", "{file}");
            assert_eq!(
                limit.fract(),
                0.0,
                "{file}: CPU limit {limit} is not whole cores"
            );
        }
    }
}

#[test]
fn every_setting_in_the_deploy_files_is_read_by_the_binary() {
    let serve_vars = env_vars_of("serve");
    for file in SERVER_DEPLOYMENTS {
        let deployment = manifest(file);
        let spec = pod_spec(&deployment);
        assert_eq!(
            spec["enableServiceLinks"].as_bool(),
            Some(false),
            "{file}: service links would add OGIVE_-prefixed variables from the Service `ogive`"
        );
        let ogive = container(spec, "ogive");
        for name in env_names(ogive) {
            if name.starts_with("OGIVE_") {
                assert!(
                    serve_vars.contains(&name),
                    "{file}: `ogive serve` reads no {name}"
                );
            }
        }
        let args = string_args(&ogive["args"]);
        assert!(matches!(parse_args(&args).command, Subcommand::Serve(_)));
        for init in spec["initContainers"]
            .as_vec()
            .map(Vec::as_slice)
            .unwrap_or(&[])
        {
            let args = string_args(&init["args"]);
            assert!(matches!(parse_args(&args).command, Subcommand::Check(_)));
        }
    }

    let unit = read_text(SYSTEMD_UNIT);
    let unit_vars: Vec<&str> = unit
        .lines()
        .filter_map(|line| line.strip_prefix("Environment="))
        .filter_map(|assignment| assignment.split_once('=').map(|(name, _)| name))
        .collect();
    assert!(unit_vars.contains(&"OGIVE_MODELS"));
    for name in unit_vars.iter().filter(|name| name.starts_with("OGIVE_")) {
        assert!(
            serve_vars.contains(*name),
            "the unit sets {name}, which serve does not read"
        );
    }
}

#[test]
fn each_score_job_pod_parses_as_its_own_shard_of_the_completions() {
    let job = manifest(SCORE_JOB);
    let spec = &job["spec"];
    assert_eq!(text(&spec["completionMode"], "completionMode"), "Indexed");
    let completions = integer(&spec["completions"], "completions");
    let score = container(pod_spec(&job), "score");
    assert_eq!(
        pod_spec(&job)["enableServiceLinks"].as_bool(),
        Some(false),
        "service links would add OGIVE_-prefixed variables"
    );
    let index_source = &env_entry(score, "JOB_COMPLETION_INDEX")
        .expect("JOB_COMPLETION_INDEX declared")["valueFrom"]["fieldRef"]["fieldPath"];
    assert_eq!(
        text(index_source, "fieldPath"),
        "metadata.annotations['batch.kubernetes.io/job-completion-index']"
    );
    let args = string_args(&score["args"]);
    let mut outputs = BTreeSet::new();
    for index in 0..completions {
        // The kubelet's $(VAR) expansion of the container's arguments.
        let expanded: Vec<String> = args
            .iter()
            .map(|arg| arg.replace("$(JOB_COMPLETION_INDEX)", &index.to_string()))
            .collect();
        let Subcommand::Score(score) = parse_args(&expanded).command else {
            panic!("the job's container does not run `ogive score`");
        };
        assert_eq!(
            score.shard.index(),
            index as u64,
            "shard index of pod {index}"
        );
        assert_eq!(
            score.shard.count(),
            completions as u64,
            "shard count of pod {index}"
        );
        outputs.insert(score.out);
    }
    assert_eq!(
        outputs.len(),
        completions as usize,
        "every shard writes its own output file"
    );
}

/// In the ConfigMap variant, every version file a ConfigMap volume places in the model
/// directory is checked by the init container, each model gets its `live` pointer, and the
/// init container checks nothing that is not mounted.
#[test]
fn configmap_variant_checks_exactly_the_versions_it_mounts() {
    let deployment = manifest(CONFIGMAP_DEPLOYMENT);
    let spec = pod_spec(&deployment);
    let ogive = container(spec, "ogive");
    let models = env_literal(ogive, "OGIVE_MODELS").expect("OGIVE_MODELS");
    let mut mounted = BTreeSet::new();
    // The model volumes are the ConfigMap ones (the receipt keys are a Secret).
    let model_volumes = list(&spec["volumes"], "volumes")
        .iter()
        .filter(|v| !v["configMap"].is_badvalue());
    for volume in model_volumes {
        let name = text(&volume["name"], "volume name");
        let mount = list(&ogive["volumeMounts"], "volumeMounts")
            .iter()
            .find(|m| m["name"].as_str() == Some(name))
            .unwrap_or_else(|| panic!("volume {name} is not mounted in the server"));
        let mount_path = text(&mount["mountPath"], "mountPath");
        let model = mount_path
            .strip_prefix(&format!("{models}/"))
            .unwrap_or_else(|| panic!("{mount_path} is not a model under {models}"));
        assert!(
            !model.contains('/'),
            "{mount_path} is not one model's folder"
        );
        assert_eq!(
            mount["readOnly"].as_bool(),
            Some(true),
            "{mount_path} is writable"
        );
        let items = list(&volume["configMap"]["items"], "configMap items");
        let paths: Vec<&str> = items
            .iter()
            .map(|i| text(&i["path"], "item path"))
            .collect();
        assert!(paths.contains(&"live"), "model {model} has no live pointer");
        for path in paths.iter().filter(|p| **p != "live") {
            let version = path
                .strip_prefix("versions/")
                .and_then(|file| file.strip_suffix(".json"))
                .unwrap_or_else(|| panic!("{model}: {path} is not versions/VERSION.json"));
            assert!(
                !version.is_empty() && !version.contains('/'),
                "{model}: {path}"
            );
            mounted.insert(format!("{mount_path}/{path}"));
        }
    }
    let init = list(&spec["initContainers"], "initContainers")
        .iter()
        .find(|c| c["name"].as_str() == Some("check-models"))
        .expect("the check-models init container");
    let Subcommand::Check(check) = parse_args(&string_args(&init["args"])).command else {
        panic!("the init container does not run `ogive check`");
    };
    let checked: BTreeSet<String> = check
        .files
        .iter()
        .map(|file| file.display().to_string())
        .collect();
    assert_eq!(
        checked, mounted,
        "files checked against version files mounted"
    );
}

/// Both server deployments give every replica the same receipt keys: OGIVE_RECEIPT_KEY_FILE
/// names the file a read-only Secret volume places, mode 0400 (the kubelet adds group read for
/// the fsGroup, which `ogive::receipt` accepts on a root-owned file), and the key file is read
/// by the real parser's flag.
#[test]
fn every_server_deployment_mounts_the_shared_receipt_keys_owner_read_only() {
    assert!(env_vars_of("serve").contains("OGIVE_RECEIPT_KEY_FILE"));
    for file in SERVER_DEPLOYMENTS {
        let deployment = manifest(file);
        let spec = pod_spec(&deployment);
        let ogive = container(spec, "ogive");
        let key_file = env_literal(ogive, "OGIVE_RECEIPT_KEY_FILE")
            .unwrap_or_else(|| panic!("{file}: OGIVE_RECEIPT_KEY_FILE is not set"));
        let volume = list(&spec["volumes"], "volumes")
            .iter()
            .find(|v| v["secret"]["secretName"].as_str() == Some("ogive-receipt-keys"))
            .unwrap_or_else(|| panic!("{file}: no volume of the Secret ogive-receipt-keys"));
        let name = text(&volume["name"], "volume name");
        let mount = list(&ogive["volumeMounts"], "volumeMounts")
            .iter()
            .find(|m| m["name"].as_str() == Some(name))
            .unwrap_or_else(|| panic!("{file}: volume {name} is not mounted in the server"));
        assert_eq!(mount["readOnly"].as_bool(), Some(true), "{file}: {name}");
        let items = list(&volume["secret"]["items"], "secret items");
        assert_eq!(items.len(), 1, "{file}: one key file");
        assert_eq!(
            format!(
                "{}/{}",
                text(&mount["mountPath"], "mountPath"),
                text(&items[0]["path"], "item path")
            ),
            key_file,
            "{file}: OGIVE_RECEIPT_KEY_FILE is the mounted file"
        );
        // Kubernetes reads `0400` as YAML 1.1 octal; this parser reads the digits as decimal.
        let mode = integer(&volume["secret"]["defaultMode"], "defaultMode");
        let mode = u32::from_str_radix(&mode.to_string(), 8).unwrap_or(u32::MAX);
        assert_eq!(mode, 0o400, "{file}: the key Secret is owner-read only");
        assert!(
            !spec["securityContext"]["fsGroup"].is_badvalue(),
            "{file}: without an fsGroup the server's user cannot read a root-owned 0400 file"
        );
    }
}

#[test]
fn prometheus_annotations_point_at_the_metrics_route() {
    for file in SERVER_DEPLOYMENTS {
        let deployment = manifest(file);
        let annotations = &deployment["spec"]["template"]["metadata"]["annotations"];
        let ogive = container(pod_spec(&deployment), "ogive");
        assert_eq!(text(&annotations["prometheus.io/scrape"], "scrape"), "true");
        assert_eq!(text(&annotations["prometheus.io/path"], "path"), "/metrics");
        let port: i64 = text(&annotations["prometheus.io/port"], "port")
            .parse()
            .expect("a port number");
        assert_eq!(Some(port), container_port(ogive, "http"), "{file}");
    }
}

/// Every `ogive_…` metric the alert rules use is one the metrics or monitoring modules register. The rules
/// would otherwise evaluate to nothing and never fire, which no promtool test can notice.
#[test]
fn alert_rules_use_only_metrics_that_ogive_registers() {
    let rules = read_text(ALERT_RULES);
    let mut registered = String::new();
    let sources = [repo_path("src/metrics"), repo_path("src/monitoring")];
    for file in sources.iter().flat_map(|dir| source_files(dir)) {
        registered.push_str(&std::fs::read_to_string(file).expect("metrics source"));
    }
    let mut used = BTreeSet::new();
    for line in rules
        .lines()
        .filter(|line| !line.trim_start().starts_with('#'))
    {
        let mut rest = line;
        while let Some(start) = rest.find("ogive_") {
            let preceding = rest[..start].chars().next_back();
            let name: String = rest[start..]
                .chars()
                .take_while(|c| c.is_ascii_alphanumeric() || *c == '_' || *c == ':')
                .collect();
            rest = &rest[start + name.len()..];
            // Recording rule names (with ':') and words inside other names are not metrics.
            if name.contains(':')
                || preceding.is_some_and(|c| c.is_ascii_alphanumeric() || c == ':')
            {
                continue;
            }
            used.insert(name);
        }
    }
    assert!(used.len() >= 10, "found too few metric names: {used:?}");
    for name in &used {
        let family = ["_bucket", "_count", "_sum"]
            .iter()
            .find_map(|suffix| name.strip_suffix(suffix))
            .unwrap_or(name);
        assert!(
            registered.contains(&format!("\"{family}\"")),
            "the rules use {name}, but neither src/metrics nor src/monitoring registers \"{family}\""
        );
    }
}

fn source_files(dir: &Path) -> Vec<PathBuf> {
    let mut files = Vec::new();
    for entry in std::fs::read_dir(dir).expect("a source folder") {
        let path = entry.expect("directory entry").path();
        if path.is_dir() {
            files.extend(source_files(&path));
        } else if path.extension().is_some_and(|e| e == "rs") {
            files.push(path);
        }
    }
    files
}

/// The behaviour the manifests rely on, from a real `ogive serve` on loopback with the demo
/// models and the Deployment's own probe paths: /livez and /readyz answer 200 once the models
/// are loaded; after SIGTERM /readyz turns 503 while the process still answers (the drain
/// delay), then the process exits by itself with success. Bounded: at most about 60 s.
#[test]
fn serve_answers_the_probe_paths_and_drains_on_sigterm() {
    let deployment = manifest(DEPLOYMENT);
    let ogive = container(pod_spec(&deployment), "ogive");
    let liveness = text(&ogive["livenessProbe"]["httpGet"]["path"], "path").to_string();
    let readiness = text(&ogive["readinessProbe"]["httpGet"]["path"], "path").to_string();

    let port = free_port();
    let admin_port = free_port();
    let drain_delay_ms = 3000;
    let shutdown_timeout_ms = 3000;
    let child = Command::new(env!("CARGO_BIN_EXE_ogive"))
        .args(["serve", "--models"])
        .arg(repo_path("model-files"))
        .args(["--listen", &format!("127.0.0.1:{port}")])
        .args(["--admin-listen", &format!("127.0.0.1:{admin_port}")])
        .args(["--drain-delay-ms", &drain_delay_ms.to_string()])
        .args(["--shutdown-timeout-ms", &shutdown_timeout_ms.to_string()])
        .args(["--workers", "1"])
        .env_remove("OGIVE_ADMIN_TOKEN_FILE")
        .env("RUST_LOG", "warn")
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .expect("start ogive serve");
    let mut server = Killed { child };
    let stderr = server.child.stderr.take().expect("stderr");
    let (log_lines, logs) = mpsc::channel();
    std::thread::spawn(move || {
        for line in BufReader::new(stderr).lines().map_while(Result::ok) {
            let _ = log_lines.send(line);
        }
    });
    let logs_so_far = || logs.try_iter().collect::<Vec<_>>().join("\n");

    let base = format!("http://127.0.0.1:{port}");
    let started = Instant::now();
    while status_of(&format!("{base}{readiness}")) != Some(200) {
        if let Some(status) = server.child.try_wait().expect("child status") {
            panic!("ogive serve exited with {status}:\n{}", logs_so_far());
        }
        assert!(
            started.elapsed() < Duration::from_secs(30),
            "{readiness} not 200 within 30 s:\n{}",
            logs_so_far()
        );
        std::thread::sleep(Duration::from_millis(50));
    }
    assert_eq!(status_of(&format!("{base}{liveness}")), Some(200));

    let terminated = Command::new("kill")
        .args(["-TERM", &server.child.id().to_string()])
        .status()
        .expect("run kill");
    assert!(terminated.success(), "kill -TERM failed");

    // Readiness must turn 503 while the listener still accepts: that is what lets load
    // balancers stop sending before connections are refused.
    let signalled = Instant::now();
    let mut seen = Vec::new();
    let mut drained_while_alive = false;
    while signalled.elapsed() < Duration::from_millis(drain_delay_ms) {
        let status = status_of(&format!("{base}{readiness}"));
        seen.push(status);
        if status == Some(503) {
            drained_while_alive = status_of(&format!("{base}{liveness}")) == Some(200);
            break;
        }
        if status.is_none() {
            break;
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    assert!(
        drained_while_alive,
        "after SIGTERM {readiness} should answer 503 while {liveness} still answers 200; \
         readiness answers seen: {seen:?}"
    );

    let limit =
        Duration::from_millis(drain_delay_ms + shutdown_timeout_ms) + Duration::from_secs(20);
    let status = wait_for_exit(&mut server.child, limit)
        .unwrap_or_else(|| panic!("ogive serve still running {limit:?} after SIGTERM"));
    assert!(
        status.success(),
        "ogive serve exited with {status}:\n{}",
        logs_so_far()
    );
}
