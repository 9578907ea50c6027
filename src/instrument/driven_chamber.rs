//! A climatic chamber driven by a driver file over a transport: the file's command templates
//! and reply patterns, its rated setpoint range enforced before anything is sent, SCPI basics
//! after each setting where the file asks for them, and the file's own safe state.

use super::driver_file::{ChamberDriver, ChamberSafe};
use super::scpi_client::{ScpiClient, ScpiError};
use super::template::Value;
use super::{Chamber, InstrumentError};
use async_trait::async_trait;
use regex::Regex;
use std::collections::BTreeMap;

/// A real (or served) climatic chamber.
pub struct DrivenChamber {
    role: String,
    driver: ChamberDriver,
    scpi: ScpiClient,
}

impl DrivenChamber {
    /// A chamber for `role`, driven by `driver` over `scpi` (plain line protocols use only its
    /// send and query).
    pub fn new(role: &str, driver: ChamberDriver, scpi: ScpiClient) -> Self {
        DrivenChamber {
            role: role.to_string(),
            driver,
            scpi,
        }
    }

    fn refused(&self, message: impl Into<String>) -> InstrumentError {
        InstrumentError::Refused {
            role: self.role.clone(),
            message: message.into(),
        }
    }

    fn error(&self, context: &str, e: ScpiError) -> InstrumentError {
        e.for_role(&self.role, context)
    }

    /// Why the driver file forbids the setpoint `c`, if it does: outside the rated range, or
    /// sent (after the template's format) as a value outside it.
    pub fn refuse(&self, c: f64) -> Option<String> {
        let [lo, hi] = self.driver.setpoint_c;
        let inside = |v: f64| v.is_finite() && (lo..=hi).contains(&v);
        if !inside(c) {
            return Some(format!(
                "{c} °C is outside the chamber's rated setpoints {lo}..{hi} °C; nothing was sent"
            ));
        }
        match self.driver.set_setpoint.as_sent("c", c) {
            Some(sent) if inside(sent) => None,
            sent => Some(format!(
                "the driver's set_setpoint format would send {} for {c} °C, outside {lo}..{hi} \
                 °C; nothing was sent",
                sent.map_or("no number".to_string(), |v| format!("{v} °C"))
            )),
        }
    }

    /// Sends `command`; where `ack` is given, reads one line and checks it.
    async fn command(&mut self, command: &str, ack: Option<Regex>) -> Result<(), InstrumentError> {
        match ack {
            Some(ack) => {
                self.reply(command, &ack, "its acknowledgment").await?;
            }
            None => self
                .scpi
                .send(command)
                .await
                .map_err(|e| self.error(&format!("`{command}`: "), e))?,
        }
        if self.driver.wait_complete {
            self.scpi
                .wait_complete()
                .await
                .map_err(|e| self.error(&format!("`{command}`: "), e))?;
        }
        if self.driver.error_queue {
            self.scpi
                .check_errors()
                .await
                .map_err(|e| self.error(&format!("`{command}`: "), e))?;
        }
        Ok(())
    }

    /// Sends `command` and matches its reply line against `pattern`; a line matching the
    /// driver's `refused` pattern is a refusal.
    async fn reply(
        &mut self,
        command: &str,
        pattern: &Regex,
        what: &str,
    ) -> Result<BTreeMap<String, String>, InstrumentError> {
        let line = self
            .scpi
            .query(command)
            .await
            .map_err(|e| self.error(&format!("`{command}`: "), e))?;
        if let Some(caps) = pattern.captures(&line) {
            return Ok(pattern
                .capture_names()
                .flatten()
                .filter_map(|n| {
                    caps.name(n)
                        .map(|m| (n.to_string(), m.as_str().to_string()))
                })
                .collect());
        }
        if let Some(caps) = self.driver.refused.as_ref().and_then(|r| r.captures(&line)) {
            let reason = caps.name("reason").map_or(line.as_str(), |m| m.as_str());
            return Err(self.refused(format!("`{command}` was refused: {reason}")));
        }
        Err(self.error(
            "",
            ScpiError::Reply {
                command: command.to_string(),
                reply: line,
                expected: format!("{what} (the driver's reply pattern)"),
            },
        ))
    }

    /// Sends `command` and reads a temperature from the `c` its reply captures.
    async fn temperature(
        &mut self,
        command: &str,
        pattern: &Regex,
    ) -> Result<f64, InstrumentError> {
        let fields = self.reply(command, pattern, "a temperature").await?;
        match fields.get("c").map(|c| c.parse::<f64>()) {
            Some(Ok(c)) if c.is_finite() => Ok(c),
            _ => Err(self.error(
                "",
                ScpiError::Reply {
                    command: command.to_string(),
                    reply: fields.get("c").cloned().unwrap_or_default(),
                    expected: "a temperature in °C".into(),
                },
            )),
        }
    }
}

#[async_trait]
impl Chamber for DrivenChamber {
    async fn identify(&mut self) -> Result<String, InstrumentError> {
        let command = self.driver.identify.text();
        let pattern = self.driver.identify_reply.clone();
        let fields = self.reply(&command, &pattern, "an identity").await?;
        Ok(fields.get("id").cloned().unwrap_or_default())
    }

    async fn set_setpoint_c(&mut self, setpoint_c: f64) -> Result<(), InstrumentError> {
        if let Some(why) = self.refuse(setpoint_c) {
            return Err(self.refused(why));
        }
        let command = self
            .driver
            .set_setpoint
            .render(&BTreeMap::from([("c", Value::Real(setpoint_c))]));
        let ack = self.driver.set_setpoint_reply.clone();
        self.command(&command, ack).await
    }

    async fn air_c(&mut self) -> Result<f64, InstrumentError> {
        let command = self.driver.air.text();
        let pattern = self.driver.air_reply.clone();
        self.temperature(&command, &pattern).await
    }

    async fn product_c(&mut self) -> Result<Option<f64>, InstrumentError> {
        let Some((command, pattern)) = self.driver.product.clone() else {
            return Ok(None);
        };
        self.temperature(&command.text(), &pattern).await.map(Some)
    }

    async fn safe_state(&mut self) -> Result<(), InstrumentError> {
        match self.driver.safe.clone() {
            ChamberSafe::Hold { setpoint_c } => self.set_setpoint_c(setpoint_c).await,
            ChamberSafe::Stop { command, reply } => self.command(&command.text(), reply).await,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::diagnostic::SourceFile;
    use crate::instrument::driver_file::{DriverFile, DriverKind};
    use crate::instrument::transport::{Address, Link};
    use std::sync::{Arc, Mutex};
    use std::time::Duration;
    use tokio::io::{AsyncBufReadExt, AsyncWriteExt, BufReader};
    use tokio::net::TcpListener;

    /// A SCPI-style chamber: settings without replies, `*OPC?` and the error queue after them.
    const SCPI_STYLE: &str = r#"
[driver]
kind = "chamber"
maker = "Test (fictional)"
model = "S-1"
[link]
line_ending = "lf"
timeout_ms = 2000.0
[scpi]
wait_complete = true
error_queue = true
[command]
identify = "*IDN?"
set_setpoint = ":CLIM:TEMP:TARG {c:.2}"
air = ":CLIM:TEMP:AIR?"
[reply]
identify = '^(?P<id>[^,]+,[^,]+,[^,]+,[^,]+)$'
air = '^(?P<c>[-+0-9.eE]+)$'
[limits]
setpoint_c = [-70.0, 180.0]
[safe_state]
setpoint_c = 23.0
"#;

    /// A scripted SCPI chamber on loopback that records every line it receives and reports a
    /// range error for targets above 100 °C (its own limit, tighter than the driver's).
    async fn scpi_chamber() -> (String, Arc<Mutex<Vec<String>>>) {
        let listener = TcpListener::bind("127.0.0.1:0").await.expect("bind");
        let address = format!("tcp:{}", listener.local_addr().expect("address"));
        let seen = Arc::new(Mutex::new(Vec::new()));
        let log = seen.clone();
        tokio::spawn(async move {
            let Ok((stream, _)) = listener.accept().await else {
                return;
            };
            let (r, mut w) = stream.into_split();
            let mut lines = BufReader::new(r).lines();
            let mut errors: Vec<&str> = Vec::new();
            while let Ok(Some(line)) = lines.next_line().await {
                log.lock().expect("log").push(line.clone());
                let reply = match line.as_str() {
                    "*IDN?" => "Test,S-1,0001,1.0".to_string(),
                    "*OPC?" => "1".into(),
                    ":CLIM:TEMP:AIR?" => "2.350E+01".into(),
                    "SYST:ERR?" => errors.pop().unwrap_or("0,\"No error\"").into(),
                    set => {
                        let c: f64 = set
                            .rsplit(' ')
                            .next()
                            .and_then(|v| v.parse().ok())
                            .unwrap_or(0.0);
                        if c > 100.0 {
                            errors.push("-222,\"Data out of range\"");
                        }
                        continue;
                    }
                };
                if w.write_all(format!("{reply}\n").as_bytes()).await.is_err() {
                    return;
                }
            }
        });
        (address, seen)
    }

    fn driven(address: &str) -> DrivenChamber {
        let file = DriverFile::parse("s1", SourceFile::new("s1.toml", SCPI_STYLE)).expect("driver");
        let DriverKind::Chamber(driver) = file.kind else {
            panic!("chamber");
        };
        let link = Link::new(
            Address::parse(address).expect("address"),
            &file.link.line_ending,
            Duration::from_secs(2),
        );
        DrivenChamber::new("chamber", *driver, ScpiClient::new(link))
    }

    #[tokio::test]
    async fn a_scpi_style_chamber_is_set_checked_and_held_at_its_safe_setpoint() {
        let (address, seen) = scpi_chamber().await;
        let mut chamber = driven(&address);
        assert_eq!(
            chamber.identify().await.expect("identify"),
            "Test,S-1,0001,1.0"
        );
        chamber.set_setpoint_c(45.0).await.expect("setpoint");
        assert_eq!(chamber.air_c().await.expect("air"), 23.5);
        assert_eq!(chamber.product_c().await.expect("product"), None);
        // Within the driver's rating but not the chamber's: its error queue refuses it.
        match chamber.set_setpoint_c(120.0).await {
            Err(InstrumentError::Refused { message, .. }) => {
                assert!(message.contains("-222,\"Data out of range\""), "{message}");
            }
            other => panic!("{other:?}"),
        }
        // Beyond the driver's rating nothing goes on the wire.
        assert!(matches!(
            chamber.set_setpoint_c(180.5).await,
            Err(InstrumentError::Refused { .. })
        ));
        chamber.safe_state().await.expect("safe state");
        let seen = seen.lock().expect("log").clone();
        assert_eq!(
            seen,
            [
                "*IDN?",
                ":CLIM:TEMP:TARG 45.00",
                "*OPC?",
                "SYST:ERR?",
                ":CLIM:TEMP:AIR?",
                ":CLIM:TEMP:TARG 120.00",
                "*OPC?",
                "SYST:ERR?",
                "SYST:ERR?",
                ":CLIM:TEMP:TARG 23.00",
                "*OPC?",
                "SYST:ERR?",
            ]
        );
    }
}
