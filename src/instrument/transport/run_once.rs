//! One program run per command (a driver's `{ run = [...] }` command): its stdout lines are the
//! replies, a non-zero exit is the instrument's error with the end of its stderr, and its
//! output is read within bounds — a line's length, the whole output's size, and the time
//! between lines — so a program that hangs or floods ends in an error, not in a stuck run or
//! unbounded memory. The program is killed if it outlives any of these.

use super::output::Tail;
use super::process::end_group;
use crate::instrument::line::{LineError, LineFramer, MAX_LINE_BYTES};
use std::process::Stdio;
use std::time::Duration;
use thiserror::Error;
use tokio::io::AsyncReadExt;
use tokio::process::Command;

/// Most bytes a program may write on stdout for one command.
pub const MAX_OUTPUT_BYTES: usize = 4 * 1024 * 1024;

/// How much of a failed program's stderr is quoted.
pub const STDERR_TAIL_BYTES: usize = 1024;

/// Why a command's program gave no replies.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum RunError {
    /// It did not start.
    #[error("{0}")]
    Start(String),
    /// It exited with a failure.
    #[error("`{program}` failed ({status}){}", tail_text(.stderr_tail))]
    Failed {
        /// The program.
        program: String,
        /// Its exit status, as the system words it.
        status: String,
        /// The end of its stderr.
        stderr_tail: String,
    },
    /// It wrote nothing, and did not end, for the timeout.
    #[error("`{program}` gave no output and did not exit within {timeout_ms} ms; it was killed")]
    Timeout {
        /// The program.
        program: String,
        /// The timeout.
        timeout_ms: u64,
    },
    /// It wrote more than a command's replies can be.
    #[error("`{program}` {what}; it was killed")]
    Flood {
        /// The program.
        program: String,
        /// Which bound it broke.
        what: String,
    },
}

fn tail_text(tail: &str) -> String {
    if tail.is_empty() {
        ": it wrote nothing on stderr".to_string()
    } else {
        format!(": {tail}")
    }
}

/// Runs `words` (program first) with no stdin and returns its stdout lines, waiting at most
/// `timeout` for each piece of output and for its exit after its output ends. Whatever it
/// leaves running in its process group is ended with it.
pub async fn run(words: &[String], timeout: Duration) -> Result<Vec<String>, RunError> {
    let mut pgid = None;
    let outcome = run_program(words, timeout, &mut pgid).await;
    end_group(pgid, words.first().map_or("", String::as_str));
    outcome
}

async fn run_program(
    words: &[String],
    timeout: Duration,
    pgid: &mut Option<u32>,
) -> Result<Vec<String>, RunError> {
    let Some((program, args)) = words.split_first() else {
        return Err(RunError::Start("the command names no program".into()));
    };
    let mut child = Command::new(program)
        .args(args)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .kill_on_drop(true)
        // Out of the terminal's process group, like `exec:` programs (see `process`).
        .process_group(0)
        .spawn()
        .map_err(|e| {
            RunError::Start(match e.kind() {
                std::io::ErrorKind::NotFound if program.contains('/') => {
                    format!("cannot start program `{program}`: there is no such file")
                }
                std::io::ErrorKind::NotFound => {
                    format!(
                        "cannot start program `{program}`: it is not on PATH (give its full path)"
                    )
                }
                _ => format!("cannot start program `{program}`: {e}"),
            })
        })?;
    // It leads its own process group, whose id is its pid.
    *pgid = child.id();
    let (Some(mut stdout), Some(mut stderr)) = (child.stdout.take(), child.stderr.take()) else {
        return Err(RunError::Start(format!(
            "`{program}`: its pipes were not opened"
        )));
    };
    // Stderr is drained beside stdout, or a program blocked on a full stderr pipe would hang.
    let tail = tokio::spawn(async move {
        let mut tail = Tail::new(STDERR_TAIL_BYTES);
        let mut buf = [0u8; 4096];
        while let Ok(n) = stderr.read(&mut buf).await {
            if n == 0 {
                break;
            }
            tail.push(&buf[..n]);
        }
        tail.text()
    });
    let timed_out = || RunError::Timeout {
        program: program.clone(),
        timeout_ms: timeout.as_millis() as u64,
    };
    let flood = |what: String| RunError::Flood {
        program: program.clone(),
        what,
    };
    let mut framer = LineFramer::new();
    let mut lines = Vec::new();
    let mut total = 0usize;
    let mut buf = [0u8; 8192];
    loop {
        let n = match tokio::time::timeout(timeout, stdout.read(&mut buf)).await {
            Err(_) => return Err(timed_out()),
            Ok(Err(e)) => {
                return Err(RunError::Start(format!(
                    "`{program}`: reading its output: {e}"
                )))
            }
            Ok(Ok(n)) => n,
        };
        if n == 0 {
            break;
        }
        total += n;
        if total > MAX_OUTPUT_BYTES {
            return Err(flood(format!(
                "wrote more than {MAX_OUTPUT_BYTES} bytes for one command"
            )));
        }
        framer.push(&buf[..n]);
        loop {
            match framer.next_line() {
                Ok(Some(line)) => lines.push(line),
                Ok(None) => break,
                Err(LineError::TooLong) => {
                    return Err(flood(format!(
                        "wrote a line longer than {MAX_LINE_BYTES} bytes"
                    )))
                }
                Err(e) => return Err(flood(e.to_string())),
            }
        }
    }
    // A last line without its newline is still a reply.
    framer.push(b"\n");
    if let Ok(Some(line)) = framer.next_line() {
        if !line.is_empty() {
            lines.push(line);
        }
    }
    let status = match tokio::time::timeout(timeout, child.wait()).await {
        Err(_) => return Err(timed_out()),
        Ok(Err(e)) => return Err(RunError::Start(format!("`{program}`: {e}"))),
        Ok(Ok(status)) => status,
    };
    let stderr_tail = tail.await.unwrap_or_default();
    if !status.success() {
        return Err(RunError::Failed {
            program: program.clone(),
            status: status.to_string(),
            stderr_tail,
        });
    }
    if !stderr_tail.is_empty() {
        tracing::info!("`{program}`: stderr: {stderr_tail}");
    }
    Ok(lines)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sh(script: &str) -> Vec<String> {
        vec!["/bin/sh".into(), "-c".into(), script.into(), "sh".into()]
    }

    #[tokio::test]
    async fn stdout_lines_are_the_replies_and_arguments_arrive_whole() {
        let mut words = sh(r#"for a in "$@"; do echo "[$a]"; done; printf 'no newline'"#);
        words.extend(["16".to_string(), "a b; rm x".to_string()]);
        assert_eq!(
            run(&words, Duration::from_secs(5)).await,
            Ok(vec![
                "[16]".to_string(),
                "[a b; rm x]".to_string(),
                "no newline".to_string()
            ])
        );
    }

    #[tokio::test]
    async fn a_failure_carries_its_status_and_stderr_tail() {
        let e = run(
            &sh("echo partial; echo 'warming up' >&2; echo 'radio not ready' >&2; exit 3"),
            Duration::from_secs(5),
        )
        .await
        .expect_err("exit 3");
        let text = e.to_string();
        assert!(text.contains("exit status: 3"), "{text}");
        assert!(text.ends_with("warming up\nradio not ready"), "{text}");
    }

    #[tokio::test]
    async fn a_background_job_the_program_leaves_is_ended() {
        // A job that keeps stdout open looks like a program still writing: the command times
        // out (and the job is ended with it). One that lets go of stdout is ended all the same.
        let lines = run(&sh("sleep 300 & echo $!"), Duration::from_secs(2)).await;
        let Err(RunError::Timeout { .. }) = lines else {
            panic!("the job held stdout open: {lines:?}");
        };
        let job = run(
            &sh("sleep 300 >/dev/null 2>&1 & echo $!"),
            Duration::from_secs(5),
        )
        .await
        .expect("runs");
        let pid = job[0].trim().to_string();
        let gone = (0..100).any(|_| {
            std::thread::sleep(Duration::from_millis(10));
            std::fs::read_to_string(format!("/proc/{pid}/stat"))
                .map_or(true, |s| s.contains(") Z "))
        });
        assert!(gone, "the background job {pid} outlived its program");
    }

    #[tokio::test]
    async fn hanging_flooding_and_missing_programs_are_errors() {
        let e = run(&sh("sleep 30"), Duration::from_millis(200))
            .await
            .expect_err("hangs");
        assert!(matches!(e, RunError::Timeout { .. }), "{e}");
        let e = run(&sh("yes reply"), Duration::from_secs(5))
            .await
            .expect_err("floods");
        assert!(e.to_string().contains("wrote more than"), "{e}");
        let e = run(&sh("head -c 100000 /dev/zero"), Duration::from_secs(5))
            .await
            .expect_err("one endless line");
        assert!(e.to_string().contains("longer than"), "{e}");
        let e = run(&["/nonexistent/tool".to_string()], Duration::from_secs(5))
            .await
            .expect_err("missing");
        assert!(
            e.to_string()
                .contains("`/nonexistent/tool`: there is no such file"),
            "{e}"
        );
    }
}
