//! What the tests that run `ogive serve` as a real process share (the deployment's probes and
//! drain, several replicas on one model directory, the README's commands): free loopback
//! ports, a child process killed when dropped, plain GETs, and waiting for an exit.

use std::path::Path;
use std::process::{Child, Command, ExitStatus, Output};
use std::time::{Duration, Instant};

/// Run `command` to its end, assert that it succeeded (showing what it printed on both
/// streams if not), and return its output.
#[track_caller]
pub fn succeeded(command: &mut Command) -> Output {
    let run = command.output().expect("run the command");
    assert!(
        run.status.success(),
        "{command:?} failed ({}):\n{}\n{}",
        run.status,
        String::from_utf8_lossy(&run.stdout),
        String::from_utf8_lossy(&run.stderr)
    );
    run
}

/// A free loopback port (the kernel picks it; released at once for the server to take).
pub fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0")
        .and_then(|listener| listener.local_addr())
        .expect("a free loopback port")
        .port()
}

/// A child process, killed and reaped when dropped (so a failing test leaves no server behind).
pub struct Killed {
    /// The process.
    pub child: Child,
}

impl Drop for Killed {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// The status of a GET, or None when nothing accepts the connection.
pub fn status_of(url: &str) -> Option<u16> {
    let agent = ureq::AgentBuilder::new()
        .timeout(Duration::from_secs(2))
        .build();
    match agent.get(url).call() {
        Ok(response) => Some(response.status()),
        Err(ureq::Error::Status(status, _)) => Some(status),
        Err(ureq::Error::Transport(_)) => None,
    }
}

/// The exit status of `child` once it exits, or None if it is still running after `limit`.
pub fn wait_for_exit(child: &mut Child, limit: Duration) -> Option<ExitStatus> {
    let started = Instant::now();
    while started.elapsed() < limit {
        if let Some(status) = child.try_wait().expect("child status") {
            return Some(status);
        }
        std::thread::sleep(Duration::from_millis(50));
    }
    None
}

/// Copy the folder `from` into `to` (created if missing), recursively.
pub fn copy_tree(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap_or_else(|e| panic!("create {}: {e}", to.display()));
    for entry in std::fs::read_dir(from).unwrap_or_else(|e| panic!("list {}: {e}", from.display()))
    {
        let entry = entry.expect("a directory entry");
        let target = to.join(entry.file_name());
        if entry.file_type().expect("a file type").is_dir() {
            copy_tree(&entry.path(), &target);
        } else {
            std::fs::copy(entry.path(), &target)
                .unwrap_or_else(|e| panic!("copy {}: {e}", entry.path().display()));
        }
    }
}

/// Write `text` to `path` as an executable script (a stand-in tool).
pub fn write_executable(path: &Path, text: &str) {
    use std::os::unix::fs::PermissionsExt;
    std::fs::write(path, text).expect("write a tool");
    std::fs::set_permissions(path, std::fs::Permissions::from_mode(0o755)).expect("chmod");
}
