//! Local programs as instruments (`exec:PROGRAM ARG…`): the program's stdin and stdout are the
//! line link, its stderr goes to the run log line by line, and it is ended when its stream is
//! dropped — stdin closed first so a well-behaved program finishes on its own, then killed after
//! a short grace, with whatever it left running in its process group — so a reconnect restarts
//! it and no run leaves a program behind.
//!
//! No shell is involved: the words come from [`super::command_line::split`] and go to the
//! operating system as they are.

use super::output::{BoundedLines, STDERR_LINE_CHARS};
use std::io;
use std::pin::Pin;
use std::process::Stdio;
use std::task::{Context, Poll};
use std::time::{Duration, Instant};
use tokio::io::{AsyncRead, AsyncWrite, ReadBuf};
use tokio::process::{Child, ChildStdin, ChildStdout, Command};

/// How long a program has to end by itself once its stdin is closed, before it is killed.
pub const END_GRACE: Duration = Duration::from_millis(300);

/// Stderr lines logged per program start; past this the rest is read and dropped, so a program
/// that floods its stderr neither blocks on a full pipe nor fills the disk.
pub const STDERR_MAX_LINES: usize = 1000;

/// A running program seen as a byte stream.
pub struct ProcessStream {
    label: String,
    child: Child,
    stdin: Option<ChildStdin>,
    stdout: ChildStdout,
}

/// Starts `words` (program first) with piped stdin, stdout and stderr. `label` names it in
/// messages and the log (the address as written). Must run inside a tokio runtime.
/// Where `program` would be found when started: a name with a `/` as a path (relative to the
/// working directory), another name on `PATH`. `None` when no such executable file exists, so a
/// bench naming a missing program is refused before anything runs.
pub fn find_program(program: &str) -> Option<std::path::PathBuf> {
    use std::os::unix::fs::PermissionsExt;
    let runnable = |p: &std::path::Path| {
        p.metadata()
            .is_ok_and(|m| m.is_file() && m.permissions().mode() & 0o111 != 0)
    };
    if program.contains('/') {
        let p = std::path::PathBuf::from(program);
        return runnable(&p).then_some(p);
    }
    std::env::var_os("PATH").and_then(|paths| {
        std::env::split_paths(&paths)
            .map(|dir| dir.join(program))
            .find(|p| runnable(p))
    })
}

/// Starts `words` (program, then its arguments) as a line link.
pub fn spawn(words: &[String], label: &str) -> io::Result<ProcessStream> {
    let Some((program, args)) = words.split_first() else {
        return Err(io::Error::new(
            io::ErrorKind::InvalidInput,
            "the command line names no program",
        ));
    };
    let mut child = Command::new(program)
        .args(args)
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        // A program whose stream is never built (an error below) is killed as it is dropped.
        .kill_on_drop(true)
        // Its own process group: a Ctrl-C at the terminal reaches taucal alone, which then
        // puts the bench in its safe state through this very program before ending it.
        .process_group(0)
        .spawn()
        .map_err(|e| start_error(program, e))?;
    let (Some(stdin), Some(stdout), Some(stderr)) =
        (child.stdin.take(), child.stdout.take(), child.stderr.take())
    else {
        return Err(io::Error::other("the program's pipes were not opened"));
    };
    // Drained on a thread of its own: the instrument's runtime only runs while a command is
    // under way, and a program that fills its stderr pipe between commands would block.
    let stderr = stderr.into_owned_fd()?;
    let log_label = label.to_string();
    std::thread::Builder::new()
        .name("exec-stderr".into())
        .spawn(move || log_stderr(std::fs::File::from(stderr), &log_label))?;
    tracing::debug!("{label}: started (pid {:?})", child.id());
    Ok(ProcessStream {
        label: label.to_string(),
        child,
        stdin: Some(stdin),
        stdout,
    })
}

/// Why a program did not start, in words that name it.
fn start_error(program: &str, e: io::Error) -> io::Error {
    let why = match e.kind() {
        io::ErrorKind::NotFound if program.contains('/') => "there is no such file".to_string(),
        io::ErrorKind::NotFound => "it is not on PATH (give its full path)".to_string(),
        io::ErrorKind::PermissionDenied => "it is not executable (chmod +x)".to_string(),
        _ => e.to_string(),
    };
    io::Error::new(e.kind(), format!("cannot start program `{program}`: {why}"))
}

/// Logs the program's stderr a line at a time, bounded in line length and count, until every
/// writer has closed it.
fn log_stderr(mut stderr: std::fs::File, label: &str) {
    use std::io::Read;
    let mut lines = BoundedLines::new(STDERR_LINE_CHARS);
    let mut logged = 0usize;
    let mut buf = [0u8; 4096];
    loop {
        let n = match stderr.read(&mut buf) {
            Ok(0) | Err(_) => break,
            Ok(n) => n,
        };
        for line in lines.push(&buf[..n]) {
            logged += 1;
            if logged <= STDERR_MAX_LINES {
                tracing::info!("{label}: stderr: {line}");
            } else if logged == STDERR_MAX_LINES + 1 {
                tracing::warn!(
                    "{label}: more than {STDERR_MAX_LINES} stderr lines; the rest is not logged"
                );
            }
        }
    }
    if let Some(line) = lines.finish() {
        if logged < STDERR_MAX_LINES {
            tracing::info!("{label}: stderr: {line}");
        }
    }
}

/// Ends `child`: waits up to [`END_GRACE`] for it to exit (its stdin is already closed), then
/// kills it, and logs how it ended. Blocking, and bounded: it runs from `Drop`, which may be
/// on a runtime that is shutting down.
fn end(child: &mut Child, label: &str) {
    let deadline = Instant::now() + END_GRACE;
    loop {
        match child.try_wait() {
            Ok(Some(status)) => {
                tracing::info!("{label}: the program ended ({status})");
                return;
            }
            Ok(None) if Instant::now() < deadline => std::thread::sleep(Duration::from_millis(5)),
            Ok(None) | Err(_) => break,
        }
    }
    match child.start_kill() {
        Ok(()) => tracing::info!(
            "{label}: the program was killed ({} ms after its stdin closed)",
            END_GRACE.as_millis()
        ),
        Err(e) => tracing::warn!("{label}: the program could not be killed: {e}"),
    }
    // Reap it where it goes at once; otherwise the runtime's reaper collects it.
    let deadline = Instant::now() + Duration::from_millis(100);
    while matches!(child.try_wait(), Ok(None)) && Instant::now() < deadline {
        std::thread::sleep(Duration::from_millis(2));
    }
}

/// Kills whatever the program left running in its process group (a shell's background job, a
/// pipeline's other half): ending the program alone would leave those behind.
pub(super) fn end_group(pgid: Option<u32>, label: &str) {
    let Some(pgid) = pgid.and_then(|p| i32::try_from(p).ok()) else {
        return;
    };
    use nix::sys::signal::{killpg, Signal};
    match killpg(nix::unistd::Pid::from_raw(pgid), Signal::SIGKILL) {
        Ok(()) => tracing::info!("{label}: processes the program left behind were killed"),
        // Nothing left in the group: the usual case.
        Err(nix::errno::Errno::ESRCH) => {}
        Err(e) => tracing::warn!("{label}: the program's process group: {e}"),
    }
}

impl Drop for ProcessStream {
    fn drop(&mut self) {
        drop(self.stdin.take());
        // The program leads its own process group (see `spawn`), whose id is its pid.
        let pgid = self.child.id();
        end(&mut self.child, &self.label);
        end_group(pgid, &self.label);
    }
}

impl AsyncRead for ProcessStream {
    fn poll_read(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &mut ReadBuf<'_>,
    ) -> Poll<io::Result<()>> {
        Pin::new(&mut self.stdout).poll_read(cx, buf)
    }
}

fn stdin_closed() -> io::Error {
    io::Error::new(io::ErrorKind::BrokenPipe, "the program's stdin is closed")
}

impl AsyncWrite for ProcessStream {
    fn poll_write(
        mut self: Pin<&mut Self>,
        cx: &mut Context<'_>,
        buf: &[u8],
    ) -> Poll<io::Result<usize>> {
        match self.stdin.as_mut() {
            Some(stdin) => Pin::new(stdin).poll_write(cx, buf),
            None => Poll::Ready(Err(stdin_closed())),
        }
    }

    fn poll_flush(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        match self.stdin.as_mut() {
            Some(stdin) => Pin::new(stdin).poll_flush(cx),
            None => Poll::Ready(Err(stdin_closed())),
        }
    }

    fn poll_shutdown(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<io::Result<()>> {
        match self.stdin.as_mut() {
            Some(stdin) => Pin::new(stdin).poll_shutdown(cx),
            None => Poll::Ready(Ok(())),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::instrument::transport::{Address, Link, LinkError};

    fn sh(script: &str) -> Address {
        Address::Exec(vec!["/bin/sh".into(), "-c".into(), script.into()])
    }

    #[tokio::test]
    async fn a_program_answers_on_its_stdout_and_is_restarted_after_it_exits() {
        // Answers two lines, then exits: the third command finds it gone, the fourth restarts it.
        let mut link = Link::new(
            sh(r#"read a; echo "re:$a"; read b; echo "re:$b""#),
            "\n",
            Duration::from_secs(5),
        );
        assert_eq!(link.query("one").await, Ok("re:one".into()));
        assert_eq!(link.query("two").await, Ok("re:two".into()));
        let gone = link.query("three").await.expect_err("the program exited");
        assert!(!gone.is_timeout(), "{gone}");
        assert!(!link.is_connected());
        assert_eq!(link.query("four").await, Ok("re:four".into()));
    }

    #[tokio::test]
    async fn a_missing_program_is_named_with_its_address() {
        let address = Address::Exec(vec!["/nonexistent/taucal-test-tool".into(), "-x".into()]);
        let mut link = Link::new(address, "\n", Duration::from_secs(1));
        let e = link.query("x").await.expect_err("nothing to start");
        assert!(matches!(e, LinkError::Connect { .. }), "{e}");
        let text = e.to_string();
        assert!(
            text.contains("exec:/nonexistent/taucal-test-tool -x"),
            "{text}"
        );
        assert!(
            text.contains("program `/nonexistent/taucal-test-tool`: there is no such file"),
            "{text}"
        );
        let bare = Address::Exec(vec!["taucal-no-such-tool-here".into()]);
        let e = Link::new(bare, "\n", Duration::from_secs(1))
            .query("x")
            .await
            .expect_err("not on PATH");
        assert!(e.to_string().contains("not on PATH"), "{e}");
    }

    /// True while `pid` names a running process (not gone, not a zombie awaiting its reaper).
    fn alive(pid: u32) -> bool {
        std::fs::read_to_string(format!("/proc/{pid}/stat"))
            .ok()
            .and_then(|stat| {
                let state = stat
                    .rsplit_once(')')?
                    .1
                    .split_whitespace()
                    .next()?
                    .to_string();
                Some(state != "Z" && state != "X")
            })
            .unwrap_or(false)
    }

    /// Starts `/bin/sh -c script`, whose first line is a process id, and reads that id.
    async fn started_with_pid(script: &str) -> (ProcessStream, u32) {
        let words: Vec<String> = ["/bin/sh", "-c", script].map(String::from).to_vec();
        let mut stream = spawn(&words, "exec:test").expect("starts");
        let mut framer = crate::instrument::line::LineFramer::new();
        let pid =
            crate::instrument::line::read_line(&mut stream, &mut framer, Duration::from_secs(5))
                .await
                .expect("pid line")
                .parse()
                .expect("a pid");
        (stream, pid)
    }

    /// True once `pid` has stopped running, waiting up to a second for the signal to land.
    fn ends(pid: u32) -> bool {
        (0..100).any(|_| {
            std::thread::sleep(Duration::from_millis(10));
            !alive(pid)
        })
    }

    #[tokio::test]
    async fn a_program_that_ignores_its_closed_stdin_is_killed_after_the_grace() {
        // It never reads its stdin, so closing that does not end it.
        let (stream, pid) = started_with_pid("echo $$; exec sleep 30").await;
        assert!(alive(pid));
        let started = Instant::now();
        drop(stream);
        let took = started.elapsed();
        assert!(took >= END_GRACE, "killed before the grace: {took:?}");
        assert!(ends(pid), "the program outlived its stream");
    }

    #[tokio::test]
    async fn a_program_that_ends_on_a_closed_stdin_is_not_killed() {
        let (stream, pid) = started_with_pid("echo $$; cat >/dev/null").await;
        let started = Instant::now();
        drop(stream);
        assert!(started.elapsed() < END_GRACE, "waited the whole grace");
        assert!(ends(pid));
    }

    #[tokio::test]
    async fn what_the_program_left_running_is_ended_with_it() {
        // A shell's background job outlives the shell unless its process group is ended.
        let (stream, job) = started_with_pid("sleep 300 & echo $!; exec cat >/dev/null").await;
        assert!(alive(job));
        drop(stream);
        assert!(ends(job), "the background job outlived the program");
    }

    #[tokio::test]
    async fn stderr_is_drained_between_commands() {
        // 200 kB of stderr, more than a pipe holds, while the runtime is not running (as
        // between two commands): the program must get past it on its own.
        let dir = tempfile::tempdir().expect("temporary directory");
        let done = dir.path().join("done");
        let script = format!(
            "head -c 200000 /dev/zero | tr '\\000' e >&2; touch {}; cat >/dev/null",
            done.display()
        );
        let words: Vec<String> = vec!["/bin/sh".into(), "-c".into(), script];
        let stream = spawn(&words, "exec:test").expect("starts");
        let waited = (0..200).any(|_| {
            std::thread::sleep(Duration::from_millis(10));
            done.exists()
        });
        drop(stream);
        assert!(waited, "the program stayed blocked on its stderr");
    }
}
