//! An attenuator driven by a driver file over a transport: the file's command templates and
//! reply pattern, SCPI basics around every setting, and the file's limits enforced before
//! anything is sent.

use super::driver_file::AttenuatorDriver;
use super::scpi_client::{ScpiClient, ScpiError};
use super::template::{on_grid, same_setting, Value};
use super::{Attenuator, InstrumentError};
use async_trait::async_trait;
use std::collections::BTreeMap;
use std::time::Duration;

/// A real (or served) step attenuator.
pub struct DrivenAttenuator {
    role: String,
    driver: AttenuatorDriver,
    scpi: ScpiClient,
    channel: u32,
}

impl DrivenAttenuator {
    /// An attenuator for `role`, driven by `driver` over `scpi`.
    pub fn new(role: &str, driver: AttenuatorDriver, scpi: ScpiClient) -> Self {
        DrivenAttenuator {
            role: role.to_string(),
            driver,
            scpi,
            channel: 1,
        }
    }

    /// The same attenuator driving its channel `channel` (from 1; the bench checked it is one
    /// the driver has).
    pub fn on_channel(mut self, channel: u32) -> Self {
        self.channel = channel;
        self
    }

    /// The values every command is filled with besides its own: the channel.
    fn values(&self) -> BTreeMap<&'static str, Value> {
        BTreeMap::from([("channel", Value::Integer(u64::from(self.channel)))])
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

    /// Why the driver file forbids `db`, if it does.
    pub fn refuse(&self, db: f64) -> Option<String> {
        if !(1..=self.driver.channels).contains(&self.channel) {
            return Some(format!(
                "channel {} is not one of the driver's {}; nothing was sent",
                self.channel, self.driver.channels
            ));
        }
        let [lo, hi] = self.driver.range_db;
        if !db.is_finite() || db < lo - 1e-9 || db > hi + 1e-9 {
            return Some(format!(
                "{db} dB is outside the driver's range {lo}..{hi} dB; nothing was sent"
            ));
        }
        if !on_grid(db, lo, self.driver.step_db) {
            return Some(format!(
                "{db} dB is not on the driver's {} dB grid; nothing was sent",
                self.driver.step_db
            ));
        }
        None
    }

    async fn apply(&mut self, command: &str) -> Result<(), ScpiError> {
        self.scpi.send(command).await?;
        if self.driver.wait_complete {
            self.scpi.wait_complete().await?;
        }
        if self.driver.error_queue {
            self.scpi.check_errors().await?;
        }
        Ok(())
    }
}

#[async_trait]
impl Attenuator for DrivenAttenuator {
    async fn identify(&mut self) -> Result<String, InstrumentError> {
        self.scpi.identify().await.map_err(|e| self.error("", e))
    }

    async fn set_atten_db(&mut self, db: f64) -> Result<(), InstrumentError> {
        if let Some(why) = self.refuse(db) {
            return Err(self.refused(why));
        }
        // What the instrument will read must be what the bench's protection checked (a driver
        // file's format is checked at load time too; this holds for any value asked for).
        let sent = self.driver.set_atten.as_sent("db", db);
        if !sent.is_some_and(|sent| same_setting(sent, db)) {
            return Err(self.refused(format!(
                "the driver's set_atten format would send {} for {db} dB; nothing was sent",
                sent.map_or("no number".to_string(), |v| format!("{v} dB"))
            )));
        }
        let mut values = self.values();
        values.insert("db", Value::Real(db));
        let command = self.driver.set_atten.render(&values);
        let outcome = match self.apply(&command).await {
            // A connection lost before or during the command: the link reconnects, and setting
            // an attenuation twice is harmless, so try once more.
            Err(ScpiError::Link(e)) if !e.is_timeout() && !self.scpi.is_connected() => {
                tracing::warn!("{}: {e}; reconnecting", self.role);
                self.apply(&command).await
            }
            other => other,
        };
        outcome.map_err(|e| self.error(&format!("`{command}`: "), e))?;
        if self.driver.settle_ms > 0.0 {
            tokio::time::sleep(Duration::from_secs_f64(self.driver.settle_ms / 1000.0)).await;
        }
        Ok(())
    }

    async fn atten_db(&mut self) -> Result<f64, InstrumentError> {
        let command = self.driver.get_atten.render(&self.values());
        let reply = self
            .scpi
            .query(&command)
            .await
            .map_err(|e| self.error(&format!("`{command}`: "), e))?;
        self.driver
            .get_atten_reply
            .captures(&reply)
            .and_then(|c| c["db"].parse::<f64>().ok())
            .ok_or_else(|| {
                self.error(
                    "",
                    ScpiError::Reply {
                        command: command.clone(),
                        reply: reply.clone(),
                        expected: "what the driver's reply.get_atten matches".into(),
                    },
                )
            })
    }

    async fn safe_state(&mut self) -> Result<(), InstrumentError> {
        let db = self.driver.safe_atten_db;
        self.set_atten_db(db).await
    }

    fn channels(&self) -> u32 {
        self.driver.channels
    }

    fn select_channel(&mut self, channel: u32) {
        self.channel = channel;
    }
}
