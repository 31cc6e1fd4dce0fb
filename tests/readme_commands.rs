//! The commands of README.md work when pasted in order: every fenced `sh` block is run, in
//! order, in one `bash` (so variables and background servers carry over from block to block),
//! in a temporary copy of the files a fresh clone has (README.md, model-files/, demo-data/).
//!
//! A block that must not run is marked by the line just before its fence:
//!
//! ```text
//! <!-- readme-commands: skip (why it cannot run here) -->
//! ```
//!
//! What the test changes, and nothing else:
//!
//! - `ogive` is the binary under test, first on PATH; `cargo install --path .` is answered by a
//!   stand-in `cargo` that does nothing (the binary is already there) and refuses any other
//!   cargo command;
//! - the addresses 127.0.0.1:8080 and 127.0.0.1:8081 become two free loopback ports, in the
//!   text and in `OGIVE_LISTEN` and `OGIVE_ADMIN_LISTEN`, and 127.0.0.1:8082 and 8083 (the
//!   walk-through's other replicas) two more in the text; the drain delay is short;
//! - the script runs with `set -euo pipefail`, and `curl` fails on an HTTP error status
//!   (`--fail-with-body`) and gives up after 30 s, so a refused request fails the test;
//! - the whole run is bounded in time, and its process group (the servers started in the
//!   background included) is killed when it ends.
//!
//! deploy/README.md needs a registry and a cluster, so its blocks are marked; what is checked
//! there is that the file it uploads exists and is the one the batch Job scores.

mod support;

use std::fmt::Write as _;
use std::path::PathBuf;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};
use support::process::{copy_tree, free_port, write_executable};

/// The marker of a block that is not run.
const SKIP: &str = "<!-- readme-commands: skip";
/// The longest the whole README may take.
const RUN_LIMIT: Duration = Duration::from_secs(600);

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A fenced shell block of a Markdown file.
#[derive(Debug)]
struct Block {
    /// Where its fence is, from 1.
    line: usize,
    /// Its commands, the fence's indentation removed.
    text: String,
    /// The reason given by a skip marker, if it has one.
    skip: Option<String>,
}

/// The `sh` (or `bash`, `shell`) blocks of `markdown`, in order.
fn shell_blocks(markdown: &str) -> Vec<Block> {
    let lines: Vec<&str> = markdown.lines().collect();
    let mut blocks = Vec::new();
    let mut i = 0;
    while i < lines.len() {
        let trimmed = lines[i].trim_start();
        let Some(info) = trimmed.strip_prefix("```") else {
            i += 1;
            continue;
        };
        let indent = lines[i].len() - trimmed.len();
        let language = info.split_whitespace().next().unwrap_or("");
        let start = i;
        let mut text = String::new();
        i += 1;
        while i < lines.len() && lines[i].trim() != "```" {
            let line = lines[i];
            let cut = line.len() - line.trim_start().len();
            text.push_str(&line[cut.min(indent)..]);
            text.push('\n');
            i += 1;
        }
        i += 1;
        if !matches!(language, "sh" | "bash" | "shell") {
            continue;
        }
        let before = lines[..start].iter().rev().find(|l| !l.trim().is_empty());
        let skip = before
            .and_then(|l| l.trim().strip_prefix(SKIP))
            .map(|rest| {
                rest.trim()
                    .trim_end_matches("-->")
                    .trim()
                    .trim_start_matches('(')
                    .trim_end_matches(')')
                    .trim()
                    .to_string()
            });
        blocks.push(Block {
            line: start + 1,
            text,
            skip,
        });
    }
    blocks
}

/// The README's example request body (the first `-d '…'` of a probability request).
fn first_request_body(text: &str) -> Option<String> {
    let start = text.find("-d '{\"observation\"")? + 4;
    let end = text[start..].find('\'')? + start;
    Some(text[start..end].to_string())
}

/// The last `### README.md line N` marker in the output: the block that was running.
fn last_block(output: &str) -> &str {
    output
        .lines()
        .rev()
        .find(|l| l.starts_with("### README.md line"))
        .unwrap_or("(before the first block)")
}

#[test]
fn every_skipped_block_says_why() {
    for file in ["README.md", "deploy/README.md"] {
        let text = std::fs::read_to_string(root().join(file)).expect("read");
        for block in shell_blocks(&text) {
            if let Some(reason) = &block.skip {
                assert!(
                    !reason.is_empty(),
                    "{file}:{}: a skip marker without a reason",
                    block.line
                );
            }
        }
    }
}

#[test]
fn the_deploy_guide_uploads_a_file_that_exists_and_the_batch_job_scores_it() {
    let guide = std::fs::read_to_string(root().join("deploy/README.md")).expect("read");
    let blocks = shell_blocks(&guide);
    assert!(!blocks.is_empty(), "the guide has its commands");
    assert!(
        blocks.iter().all(|b| b.skip.is_some()),
        "every block of the deploy guide needs a cluster and says so"
    );
    let commands: String = blocks.iter().map(|b| b.text.as_str()).collect();
    let upload = commands
        .split("--data-binary @")
        .nth(1)
        .and_then(|rest| rest.split_whitespace().next())
        .expect("the guide uploads a model file");
    assert!(
        root().join(upload).is_file(),
        "the guide uploads {upload}, which a clone does not have"
    );
    // model-files/NAME/versions/VERSION.json is uploaded as NAME, VERSION.
    let parts: Vec<&str> = upload.trim_end_matches(".json").split('/').collect();
    let [_, name, _, version] = parts.as_slice() else {
        panic!("{upload} is not model-files/NAME/versions/VERSION.json");
    };
    let route = format!("/models/{name}/versions/{version}");
    assert!(commands.contains(&route), "the upload goes to {route}");
    assert!(
        commands.contains(&format!("\"version\": \"{version}\"")),
        "the guide promotes the version it uploaded"
    );
    let job = std::fs::read_to_string(root().join("deploy/kubernetes/batch/score-job.yaml"))
        .expect("read");
    let scored = format!("/models/{name}/versions/{version}.json");
    assert!(
        job.contains(&format!("- {scored}")),
        "the batch Job scores {scored}, the version the guide stores"
    );
}

#[test]
fn the_readme_commands_work_pasted_in_order_on_a_fresh_copy() {
    let readme = std::fs::read_to_string(root().join("README.md")).expect("read README.md");
    let blocks = shell_blocks(&readme);
    assert!(blocks.iter().filter(|b| b.skip.is_none()).count() >= 4);

    let work = tempfile::tempdir().expect("temporary folder");
    let clone = work.path().join("ogive");
    std::fs::create_dir_all(&clone).expect("mkdir");
    std::fs::copy(root().join("README.md"), clone.join("README.md")).expect("copy README.md");
    for folder in ["model-files", "demo-data"] {
        copy_tree(&root().join(folder), &clone.join(folder));
    }
    let tools = work.path().join("tools");
    let scratch = work.path().join("tmp");
    let home = work.path().join("home");
    for folder in [&tools, &scratch, &home] {
        std::fs::create_dir_all(folder).expect("mkdir");
    }
    std::os::unix::fs::symlink(env!("CARGO_BIN_EXE_ogive"), tools.join("ogive")).expect("link");
    write_executable(
        &tools.join("cargo"),
        "#!/bin/sh\n\
         if [ \"$*\" = 'install --path .' ]; then echo '(test) ogive is the binary under test'; exit 0; fi\n\
         echo \"(test) cargo $* is not run by tests/readme_commands.rs\" >&2; exit 1\n",
    );

    let (public, admin) = (free_port(), free_port());
    let (second, third) = (free_port(), free_port());
    let mut script = String::from(
        "set -euo pipefail\n\
         curl() {\n\
         \x20 case \" $* \" in\n\
         \x20   *' -f '*|*' -sf '*|*' --fail '*) command curl --max-time 30 \"$@\" ;;\n\
         \x20   *) command curl --fail-with-body --max-time 30 \"$@\" ;;\n\
         \x20 esac\n\
         }\n",
    );
    for block in blocks.iter().filter(|b| b.skip.is_none()) {
        let text = block
            .text
            .replace("127.0.0.1:8080", &format!("127.0.0.1:{public}"))
            .replace("127.0.0.1:8081", &format!("127.0.0.1:{admin}"))
            .replace("127.0.0.1:8082", &format!("127.0.0.1:{second}"))
            .replace("127.0.0.1:8083", &format!("127.0.0.1:{third}"));
        let _ = writeln!(script, "echo '### README.md line {}'", block.line);
        script.push_str(&text);
        script.push_str("echo\n");
    }
    script.push_str("echo '### all blocks ran'\n");
    std::fs::write(work.path().join("readme.sh"), &script).expect("write the script");

    let log_path = work.path().join("output.txt");
    let log = std::fs::File::create(&log_path).expect("create the log");
    let mut command = Command::new("bash");
    command
        .arg(work.path().join("readme.sh"))
        .current_dir(&clone)
        .stdin(Stdio::null())
        .stdout(log.try_clone().expect("log"))
        .stderr(log);
    for (key, _) in std::env::vars_os() {
        if key.to_string_lossy().starts_with("OGIVE_") {
            command.env_remove(key);
        }
    }
    let path = std::env::var_os("PATH").unwrap_or_default();
    let mut search = vec![tools.clone()];
    search.extend(std::env::split_paths(&path));
    command
        .env("PATH", std::env::join_paths(search).expect("PATH"))
        .env("HOME", &home)
        .env("TMPDIR", &scratch)
        .env("OGIVE_LISTEN", format!("127.0.0.1:{public}"))
        .env("OGIVE_ADMIN_LISTEN", format!("127.0.0.1:{admin}"))
        .env("OGIVE_DRAIN_DELAY_MS", "100");
    std::os::unix::process::CommandExt::process_group(&mut command, 0);
    let mut child = command.spawn().expect("run bash");
    let group = child.id().to_string();
    let started = Instant::now();
    let status = loop {
        if let Some(status) = child.try_wait().expect("wait for bash") {
            break Some(status);
        }
        if started.elapsed() > RUN_LIMIT {
            break None;
        }
        std::thread::sleep(Duration::from_millis(100));
    };
    // Whatever happened, nothing the README started outlives the test.
    let _ = Command::new("kill")
        .args(["-KILL", "--", &format!("-{group}")])
        .stderr(Stdio::null())
        .status();
    let _ = child.wait();
    let output = std::fs::read_to_string(&log_path).unwrap_or_default();
    let tail: String = {
        let chars: Vec<char> = output.chars().collect();
        chars[chars.len().saturating_sub(6000)..].iter().collect()
    };
    match status {
        None => panic!(
            "the README took longer than {RUN_LIMIT:?}; last block started: {}\n{tail}",
            last_block(&output)
        ),
        Some(status) => assert!(
            status.success() && output.contains("### all blocks ran"),
            "the README failed ({status}) in the block at {}\n{tail}",
            last_block(&output)
        ),
    }

    // What the blocks were for happened.
    assert!(output.contains("\"probability\""), "{tail}");
    assert!(
        clone.join("scored.csv").is_file(),
        "ogive score wrote its file"
    );
    let plots = std::fs::read_dir(clone.join("plots")).expect("ogive describe wrote plots");
    assert!(plots
        .filter_map(Result::ok)
        .any(|e| e.path().extension().is_some_and(|x| x == "svg")));
    assert!(clone
        .join("model-files/lease-arrears/versions/1.1.0.json")
        .is_file());
    assert!(output.contains("\"action\":\"rollback\""), "{tail}");
    // The example in the text is the one the server prints.
    let printed = output
        .lines()
        .find(|l| l.contains("-d '{\"observation\"") && l.contains("/models/lease-arrears/"))
        .and_then(first_request_body)
        .expect("the server printed an example for lease-arrears");
    assert_eq!(first_request_body(&readme), Some(printed));
}
