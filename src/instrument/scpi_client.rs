//! The SCPI basics every SCPI instrument shares (IEEE 488.2 common commands and the SCPI error
//! queue), on top of a line link: identify with `*IDN?`, wait for settings with `*OPC?`, and
//! drain `SYST:ERR?` so that an error inside the instrument becomes an error of the run, with
//! the instrument's own code and text. Reply parsing is pure and tested apart.

use super::transport::{Link, LinkError};
use super::InstrumentError;
use thiserror::Error;

/// Most entries read from an error queue in one drain: a queue that never reports "no error"
/// is itself a fault, not a reason to loop forever.
pub const MAX_QUEUE_READS: usize = 32;

/// What went wrong in a SCPI exchange.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum ScpiError {
    /// The link failed.
    #[error(transparent)]
    Link(#[from] LinkError),
    /// The instrument reported errors from its queue.
    #[error("the instrument reported {}", .0.iter().map(|(c, t)| format!("{c},\"{t}\"")).collect::<Vec<_>>().join("; "))]
    Instrument(Vec<(i32, String)>),
    /// A reply did not have the expected form.
    #[error("`{command}` was answered `{reply}`, which is not {expected}")]
    Reply {
        /// The command sent.
        command: String,
        /// The line that came back.
        reply: String,
        /// What was expected.
        expected: String,
    },
}

impl ScpiError {
    /// The error as the runner judges it for `role`, its message after `context`: a lost
    /// connection, a timeout or an unreadable reply may pass; an error the instrument reports
    /// itself is a refusal, which will not.
    pub fn for_role(self, role: &str, context: &str) -> InstrumentError {
        let message = format!("{context}{self}");
        let role = role.to_string();
        match self {
            ScpiError::Link(_) | ScpiError::Reply { .. } => {
                InstrumentError::Transient { role, message }
            }
            ScpiError::Instrument(_) => InstrumentError::Refused { role, message },
        }
    }
}

/// Parses one `SYST:ERR?` reply: `<code>,"<text>"` (SCPI 1999 Vol 2 §21.8). Code 0 means the
/// queue is empty.
pub fn parse_error_entry(reply: &str) -> Option<(i32, String)> {
    let (code, text) = reply.trim().split_once(',')?;
    let code = code.trim().parse::<i32>().ok()?;
    let text = text.trim().trim_matches('"').to_string();
    Some((code, text))
}

/// A SCPI client over a link.
pub struct ScpiClient {
    link: Link,
}

impl ScpiClient {
    /// Wraps a link.
    pub fn new(link: Link) -> Self {
        ScpiClient { link }
    }

    /// Sends a command that has no reply.
    pub async fn send(&mut self, command: &str) -> Result<(), ScpiError> {
        Ok(self.link.send(command).await?)
    }

    /// Sends a query and returns its reply line.
    pub async fn query(&mut self, command: &str) -> Result<String, ScpiError> {
        Ok(self.link.query(command).await?)
    }

    /// `*IDN?`: the identity, four comma-separated fields (IEEE 488.2 §10.14).
    pub async fn identify(&mut self) -> Result<String, ScpiError> {
        let reply = self.query("*IDN?").await?;
        if reply.split(',').count() != 4 {
            return Err(ScpiError::Reply {
                command: "*IDN?".into(),
                reply,
                expected: "four fields: maker, model, serial number, firmware".into(),
            });
        }
        Ok(reply)
    }

    /// `*OPC?`: returns once every pending operation has completed (IEEE 488.2 §10.19).
    pub async fn wait_complete(&mut self) -> Result<(), ScpiError> {
        let reply = self.query("*OPC?").await?;
        if reply.trim() == "1" {
            Ok(())
        } else {
            Err(ScpiError::Reply {
                command: "*OPC?".into(),
                reply,
                expected: "`1`".into(),
            })
        }
    }

    /// Reads `SYST:ERR?` until the queue is empty; fails with every error it held.
    pub async fn check_errors(&mut self) -> Result<(), ScpiError> {
        let mut errors = Vec::new();
        for _ in 0..MAX_QUEUE_READS {
            let reply = self.query("SYST:ERR?").await?;
            match parse_error_entry(&reply) {
                Some((0, _)) => break,
                Some(entry) => errors.push(entry),
                None => {
                    return Err(ScpiError::Reply {
                        command: "SYST:ERR?".into(),
                        reply,
                        expected: "`<code>,\"<text>\"`".into(),
                    })
                }
            }
        }
        if errors.is_empty() {
            Ok(())
        } else {
            Err(ScpiError::Instrument(errors))
        }
    }

    /// True while the link is connected.
    pub fn is_connected(&self) -> bool {
        self.link.is_connected()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_error_queue_entries() {
        // SCPI 1999 Vol 2 §21.8: "<Error/event number>,<Error/event description>", 0 = no error.
        assert_eq!(
            parse_error_entry("0,\"No error\""),
            Some((0, "No error".into()))
        );
        assert_eq!(
            parse_error_entry("-113,\"Undefined header\""),
            Some((-113, "Undefined header".into()))
        );
        assert_eq!(
            parse_error_entry("-222,\"Data out of range;DAMP:SETT 120\""),
            Some((-222, "Data out of range;DAMP:SETT 120".into()))
        );
        assert_eq!(parse_error_entry("garbage"), None);
    }
}
