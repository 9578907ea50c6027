//! A ranging device driven through its line console, as its driver file defines it: start a
//! burst, read one record per exchange (or one summary per burst), stop at the end or failure
//! line, and skip unsolicited lines (a boot banner). Records come in whichever form the driver's
//! exchange pattern captures — raw timestamps, a device-computed RTT, or a distance with the
//! device's applied K (reported, or declared by the driver) — and a record that carries no
//! complete form while saying `ok` is garbled. Holding the device to one form and one applied K
//! for the whole run is the runner's (`runner::report_watch`), which sees every device, not only
//! consoles. Line classification is pure; the async part only moves lines.
//!
//! A command the driver gives as a program (`{ run = [...] }`) is run instead of sent, and its
//! stdout lines are read exactly as the link's would be, so both forms share every rule above.

use super::command::Filled;
use super::driver_file::ConsoleDriver;
use super::template::Value;
use super::transport::run_once::{self, RunError};
use super::transport::Link;
use super::{BurstSpec, InstrumentError, RangingDevice};
use crate::data::{DeviceExchange, STATUS_OK, TIMESTAMP_END_PS};
use async_trait::async_trait;
use regex::Captures;
use std::collections::{BTreeMap, VecDeque};

/// Status given to an exchange whose record lacks a status field and a timestamp.
pub const STATUS_INCOMPLETE: &str = "incomplete";

/// Lines read beyond a burst's largest size before giving up on getting back in step.
const RESYNC_SPARE_LINES: usize = 64;

/// What one console line means.
#[derive(Debug, Clone, PartialEq)]
pub enum ConsoleLine {
    /// One exchange's record.
    Exchange(DeviceExchange),
    /// The burst ended.
    End,
    /// The burst failed, with the console's reason.
    Fail(String),
    /// An unsolicited line to ignore.
    Banner,
    /// Anything else.
    Other,
}

fn field<T: std::str::FromStr>(
    caps: &Captures,
    name: &str,
    missing: &str,
) -> Result<Option<T>, String> {
    match caps.name(name).map(|m| m.as_str()) {
        None => Ok(None),
        Some(v) if v == missing || v.is_empty() => Ok(None),
        Some(v) => v
            .parse::<T>()
            .map(Some)
            .map_err(|_| format!("field `{name}` = `{v}` is not a number")),
    }
}

/// A timestamp field: a 48-bit counter reading, or absent.
fn timestamp(caps: &Captures, name: &str, missing: &str) -> Result<Option<u64>, String> {
    match field::<u64>(caps, name, missing)? {
        Some(v) if v >= TIMESTAMP_END_PS => Err(format!(
            "field `{name}` = `{v}` is beyond the 48-bit counter (at most {})",
            TIMESTAMP_END_PS - 1
        )),
        v => Ok(v),
    }
}

/// The form a recorded row came in, by the values it carries (design §6).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RowForm {
    /// Raw t1..t4 (or some of them, for an exchange that did not complete).
    Timestamps,
    /// A round-trip time the device computed.
    Rtt,
    /// A distance, the device's applied K removed.
    Range,
}

impl RowForm {
    /// The form's name in messages.
    pub fn name(self) -> &'static str {
        match self {
            RowForm::Timestamps => "timestamps",
            RowForm::Rtt => "rtt",
            RowForm::Range => "range",
        }
    }
}

/// The form of `x`; `None` for a row that carries no value (a lost frame, a failed burst).
pub fn row_form(x: &DeviceExchange) -> Result<Option<RowForm>, String> {
    let stamps = [x.t1_ps, x.t2_ps, x.t3_ps, x.t4_ps]
        .iter()
        .any(Option::is_some);
    let carried: Vec<RowForm> = [
        (stamps, RowForm::Timestamps),
        (x.rtt_ps.is_some(), RowForm::Rtt),
        (x.range_mm.is_some(), RowForm::Range),
    ]
    .into_iter()
    .filter_map(|(present, form)| present.then_some(form))
    .collect();
    match carried.as_slice() {
        [] => Ok(None),
        [one] => Ok(Some(*one)),
        [a, b, ..] => Err(format!(
            "carries both {} and {}, which no single form of report does",
            a.name(),
            b.name()
        )),
    }
}

/// A field that must be a finite number, or absent.
fn finite(caps: &Captures, name: &str, missing: &str) -> Result<Option<f64>, String> {
    match field::<f64>(caps, name, missing)? {
        Some(v) if !v.is_finite() => Err(format!("field `{name}` = `{v}` is not a finite number")),
        v => Ok(v),
    }
}

/// Classifies a line by the driver's patterns; a record whose fields do not parse, or that says
/// `ok` without carrying a complete form, is an error.
pub fn classify(driver: &ConsoleDriver, line: &str) -> Result<ConsoleLine, String> {
    if let Some(caps) = driver.exchange.captures(line) {
        let m = driver.missing.as_str();
        let range_mm = finite(&caps, "range", m)?
            .zip(driver.range_unit)
            .map(|(v, unit)| v * unit.mm());
        let mut x = DeviceExchange {
            t1_ps: timestamp(&caps, "t1", m)?,
            t2_ps: timestamp(&caps, "t2", m)?,
            t3_ps: timestamp(&caps, "t3", m)?,
            t4_ps: timestamp(&caps, "t4", m)?,
            dut_gain: field(&caps, "gain", m)?,
            dut_rssi_dbm: field(&caps, "rssi", m)?,
            ref_gain: field(&caps, "ref_gain", m)?,
            rtt_ps: finite(&caps, "rtt", m)?,
            range_mm,
            frames: field(&caps, "frames", m)?.unwrap_or(u32::from(!driver.burst_summary)),
            applied_k_ps: finite(&caps, "applied_k", m)?
                .or(driver.applied_k_ps)
                .filter(|_| range_mm.is_some()),
            ..DeviceExchange::empty(String::new())
        };
        let complete = match row_form(&x)? {
            Some(RowForm::Timestamps) => [x.t1_ps, x.t2_ps, x.t3_ps, x.t4_ps]
                .iter()
                .all(Option::is_some),
            Some(RowForm::Rtt) => true,
            // A driver that never learns the K leaves it to the bench's `[dut] applied_k_ps`.
            Some(RowForm::Range) => x.applied_k_ps.is_some() || !driver.learns_applied_k(),
            None => false,
        };
        x.status = match caps.name("status").map(|s| s.as_str()) {
            Some(STATUS_OK) if !complete => {
                return Err(
                    "says ok but carries no complete form of report (timestamps, rtt, \
                            or a range with its applied K)"
                        .into(),
                )
            }
            Some(s) if !s.is_empty() && s != m => s.to_string(),
            _ if complete => STATUS_OK.to_string(),
            _ => STATUS_INCOMPLETE.to_string(),
        };
        return Ok(ConsoleLine::Exchange(x));
    }
    if driver.burst_end.is_match(line) {
        return Ok(ConsoleLine::End);
    }
    if let Some(caps) = driver.burst_fail.captures(line) {
        let reason = caps
            .name("reason")
            .map_or_else(|| line.to_string(), |r| r.as_str().to_string());
        return Ok(ConsoleLine::Fail(reason));
    }
    if driver.banner.as_ref().is_some_and(|b| b.is_match(line)) {
        return Ok(ConsoleLine::Banner);
    }
    Ok(ConsoleLine::Other)
}

/// Why `rows` cannot be recorded under `driver`: a reported applied K that is not the one the
/// driver declares (the driver file or the device is wrong, and asking again will not help).
pub fn contradiction(driver: &ConsoleDriver, rows: &[DeviceExchange]) -> Option<String> {
    let declared = driver.applied_k_ps?;
    rows.iter()
        .filter_map(|x| x.applied_k_ps)
        .find(|k| *k != declared)
        .map(|k| {
            format!(
                "the device reports an applied K of {k} ps, but its driver declares \
                 {declared} ps: one of them is wrong, and ranges under either would give another K"
            )
        })
}

/// Why a console command went wrong, before it becomes an [`InstrumentError`].
#[derive(Debug)]
enum Trouble {
    /// The link failed: the connection dropped or a reply timed out.
    Link(String),
    /// A reply the driver cannot read: corrupted on the line, or out of step.
    Garbled(String),
    /// The device printed its boot banner after it had answered: it restarted.
    Restarted,
    /// The device's reports contradict its driver file: asking again would not help.
    Contradicts(String),
    /// The device refused or failed the command.
    Device(String),
}

/// A ranging device behind its console.
pub struct DrivenConsole {
    role: String,
    driver: ConsoleDriver,
    link: Link,
    /// Whether the device has answered on this connection: a banner before that is the
    /// greeting of a new connection, after it a restart.
    answered: bool,
    /// The stdout lines of the last command when it was a program (`run`): its replies are
    /// read from here instead of the link.
    ran: Option<VecDeque<String>>,
    /// The serial number the identity reply named, once it has been asked for.
    serial: Option<Option<String>>,
}

impl DrivenConsole {
    /// A console for `role`, defined by `driver`, over `link`.
    pub fn new(role: &str, driver: ConsoleDriver, link: Link) -> Self {
        DrivenConsole {
            role: role.to_string(),
            driver,
            link,
            answered: false,
            ran: None,
            serial: None,
        }
    }

    fn error(&self, trouble: Trouble) -> InstrumentError {
        let role = self.role.clone();
        match trouble {
            Trouble::Link(message) | Trouble::Garbled(message) => {
                InstrumentError::Transient { role, message }
            }
            Trouble::Restarted => InstrumentError::Restarted { role },
            Trouble::Contradicts(message) => InstrumentError::Refused { role, message },
            Trouble::Device(message) => InstrumentError::Failed { role, message },
        }
    }

    /// Why the driver file forbids this burst, if it does.
    pub fn refuse(&self, spec: &BurstSpec) -> Option<String> {
        let d = &self.driver;
        let c = spec.channel;
        if spec.frames < d.frames[0] || spec.frames > d.frames[1] {
            return Some(format!(
                "{} exchanges per burst is outside the driver's {}..{}",
                spec.frames, d.frames[0], d.frames[1]
            ));
        }
        if c.center_mhz < d.center_mhz[0] || c.center_mhz > d.center_mhz[1] {
            return Some(format!(
                "{} MHz is outside the driver's {}..{} MHz",
                c.center_mhz, d.center_mhz[0], d.center_mhz[1]
            ));
        }
        if !d.bw_mhz.contains(&c.bw_mhz) {
            return Some(format!(
                "{} MHz bandwidth is not one the driver lists ({:?})",
                c.bw_mhz, d.bw_mhz
            ));
        }
        None
    }

    /// Sends a line, or runs a program and keeps its stdout lines as the replies to read.
    async fn send(&mut self, command: &Filled) -> Result<(), Trouble> {
        self.ran = None;
        let words = match command {
            Filled::Line(line) => {
                if !self.link.is_connected() {
                    self.answered = false;
                }
                return self
                    .link
                    .send(line)
                    .await
                    .map_err(|e| Trouble::Link(format!("`{line}`: {e}")));
            }
            Filled::Run(words) => words,
        };
        // Each run is a fresh start: a banner it prints first is its greeting.
        self.answered = false;
        match run_once::run(words, self.link.timeout()).await {
            Ok(lines) => {
                self.ran = Some(lines.into());
                Ok(())
            }
            Err(e @ RunError::Timeout { .. }) => Err(Trouble::Link(e.to_string())),
            Err(e) => Err(Trouble::Device(e.to_string())),
        }
    }

    /// The next line that is not a banner (`want` wins over the banner pattern). A banner
    /// before the device has answered on this connection is skipped as its greeting; after,
    /// it means the device restarted, and the rest of the banner is then skipped as the
    /// greeting it is.
    async fn line(
        &mut self,
        context: &str,
        want: Option<&regex::Regex>,
    ) -> Result<String, Trouble> {
        loop {
            let line = match self.ran.as_mut() {
                Some(replies) => replies.pop_front().ok_or_else(|| {
                    Trouble::Garbled(format!("{context}: the program's output ended early"))
                })?,
                None => self
                    .link
                    .read_line()
                    .await
                    .map_err(|e| Trouble::Link(format!("{context}: {e}")))?,
            };
            let wanted = want.is_some_and(|w| w.is_match(&line));
            if !wanted && matches!(classify(&self.driver, &line), Ok(ConsoleLine::Banner)) {
                if self.answered {
                    self.answered = false;
                    return Err(Trouble::Restarted);
                }
                continue;
            }
            self.answered = true;
            return Ok(line);
        }
    }

    /// Reads the reply to `command`, which must match `want`.
    async fn expect(&mut self, command: &str, want: &regex::Regex) -> Result<String, Trouble> {
        let line = self.line(&format!("`{command}`"), Some(want)).await?;
        if want.is_match(&line) {
            return Ok(line);
        }
        match classify(&self.driver, &line) {
            Ok(ConsoleLine::Fail(reason)) => {
                Err(Trouble::Device(format!("`{command}` failed: {reason}")))
            }
            _ => Err(Trouble::Garbled(format!(
                "`{command}` was answered `{line}`, which the driver does not expect"
            ))),
        }
    }

    async fn run_burst(&mut self, spec: &BurstSpec) -> Result<Vec<DeviceExchange>, Trouble> {
        let filled = self.driver.start_burst.fill(&BTreeMap::from([
            ("frames", Value::Integer(u64::from(spec.frames))),
            (
                "center_mhz",
                Value::Integer(u64::from(spec.channel.center_mhz)),
            ),
            ("bw_mhz", Value::Integer(u64::from(spec.channel.bw_mhz))),
        ]));
        let command = filled.to_string();
        self.send(&filled).await?;
        if let Some(ack) = self.driver.start_burst_reply.clone() {
            self.expect(&command, &ack).await?;
        }
        let context = format!("burst after `{command}`");
        let mut exchanges = Vec::with_capacity(spec.frames as usize);
        loop {
            let line = self.line(&context, None).await?;
            match classify(&self.driver, &line) {
                Ok(ConsoleLine::Exchange(x)) => exchanges.push(x),
                Ok(ConsoleLine::End) => break,
                Ok(ConsoleLine::Fail(reason)) => {
                    return Err(Trouble::Device(format!("burst failed: {reason}")))
                }
                Ok(ConsoleLine::Banner | ConsoleLine::Other) => {
                    return Err(Trouble::Garbled(format!(
                        "unexpected line during a burst: `{line}`"
                    )))
                }
                Err(why) => return Err(Trouble::Garbled(format!("`{line}`: {why}"))),
            }
        }
        if self.driver.burst_summary {
            match exchanges.as_slice() {
                [one] if one.frames <= spec.frames => {}
                [one] => {
                    return Err(Trouble::Garbled(format!(
                        "the burst's summary counts {} frames, {} were asked for",
                        one.frames, spec.frames
                    )))
                }
                rows => {
                    return Err(Trouble::Garbled(format!(
                        "the burst reported {} summary lines, one was expected",
                        rows.len()
                    )))
                }
            }
        } else if exchanges.len() != spec.frames as usize {
            return Err(Trouble::Garbled(format!(
                "the burst reported {} exchanges, {} were asked for",
                exchanges.len(),
                spec.frames
            )));
        }
        if let Some(why) = contradiction(&self.driver, &exchanges) {
            return Err(Trouble::Contradicts(format!("after `{command}`: {why}")));
        }
        Ok(exchanges)
    }

    /// Gets back in step after an unreadable reply, so the next command's reply is not mistaken
    /// for the rest of this one's: in a burst, reads to the burst's end line; otherwise (or if
    /// that end never comes) reads until the console falls silent for the link's timeout,
    /// which closes the link, and the next command starts on a fresh connection.
    async fn resync(&mut self, in_burst: bool) {
        // A program's replies are all read already: the next command runs it afresh.
        if self.ran.take().is_some() {
            return;
        }
        // A peer that never falls silent (a program flooding its output) would hold this loop
        // forever: past a burst's worth of lines the link is closed instead.
        let mut budget = self.driver.frames[1] as usize + RESYNC_SPARE_LINES;
        while let Ok(line) = self.link.read_line().await {
            budget = budget.saturating_sub(1);
            if budget == 0 {
                self.link.close();
                return;
            }
            if in_burst
                && matches!(
                    classify(&self.driver, &line),
                    Ok(ConsoleLine::End | ConsoleLine::Fail(_))
                )
            {
                return;
            }
        }
    }

    /// A command's failure, after getting back in step if its reply was unreadable.
    async fn fail(&mut self, trouble: Trouble, in_burst: bool) -> InstrumentError {
        if let Trouble::Garbled(_) = trouble {
            self.resync(in_burst).await;
        }
        self.error(trouble)
    }

    /// Sends `command` and reads the reply matching `want`.
    async fn query(&mut self, command: &Filled, want: &regex::Regex) -> Result<String, Trouble> {
        self.send(command).await?;
        self.expect(&command.to_string(), want).await
    }
}

#[async_trait]
impl RangingDevice for DrivenConsole {
    async fn identify(&mut self) -> Result<String, InstrumentError> {
        let command = self.driver.identify.fill(&BTreeMap::new());
        let want = self.driver.identify_reply.clone();
        let line = match self.query(&command, &want).await {
            Ok(line) => line,
            Err(t) => return Err(self.fail(t, false).await),
        };
        let caps = want.captures(&line);
        self.serial = Some(
            caps.as_ref()
                .and_then(|c| c.name("serial"))
                .map(|m| m.as_str().trim().to_string())
                .filter(|s| !s.is_empty()),
        );
        Ok(caps.map_or(line.clone(), |c| c["id"].to_string()))
    }

    async fn serial(&mut self) -> Result<Option<String>, InstrumentError> {
        if self.serial.is_none() {
            self.identify().await?;
        }
        Ok(self.serial.clone().flatten())
    }

    async fn burst(&mut self, spec: &BurstSpec) -> Result<Vec<DeviceExchange>, InstrumentError> {
        if let Some(why) = self.refuse(spec) {
            return Err(InstrumentError::Refused {
                role: self.role.clone(),
                message: format!("{why}; nothing was sent"),
            });
        }
        match self.run_burst(spec).await {
            Ok(x) => Ok(x),
            // A failed link has already been closed, taking the burst's rest with it.
            Err(trouble) => Err(self.fail(trouble, true).await),
        }
    }

    async fn safe_state(&mut self) -> Result<(), InstrumentError> {
        let command = Filled::Line(self.driver.safe_command.text());
        let outcome = match self.driver.safe_reply.clone() {
            Some(reply) => self.query(&command, &reply).await.map(drop),
            None => self.send(&command).await,
        };
        match outcome {
            Ok(()) => Ok(()),
            Err(t) => Err(self.fail(t, false).await),
        }
    }

    async fn temperature_c(&mut self) -> Result<Option<f64>, InstrumentError> {
        let Some((command, reply)) = self.driver.temperature.clone() else {
            return Ok(None);
        };
        let command = command.fill(&BTreeMap::new());
        let line = match self.query(&command, &reply).await {
            Ok(line) => line,
            Err(t) => return Err(self.fail(t, false).await),
        };
        let caps = reply.captures(&line).ok_or_else(|| {
            self.error(Trouble::Garbled(format!(
                "`{command}`: `{line}` does not match"
            )))
        })?;
        field::<f64>(&caps, "c", &self.driver.missing)
            .map_err(|why| self.error(Trouble::Garbled(format!("`{command}`: {why}"))))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::diagnostic::SourceFile;
    use crate::instrument::driver_file::{DriverFile, DriverKind};

    fn wren() -> ConsoleDriver {
        let text = include_str!("../../drivers/wren6-console.toml");
        match DriverFile::parse("wren6-console", SourceFile::new("wren6-console.toml", text)) {
            Ok(DriverFile {
                kind: DriverKind::RangingConsole(c),
                ..
            }) => *c,
            _ => panic!("the shipped console driver loads"),
        }
    }

    fn shipped(name: &str, text: &str) -> ConsoleDriver {
        match DriverFile::parse(name, SourceFile::new(name, text)) {
            Ok(DriverFile {
                kind: DriverKind::RangingConsole(c),
                ..
            }) => *c,
            _ => panic!("{name} loads"),
        }
    }

    fn marlet() -> ConsoleDriver {
        shipped(
            "harrowdene-marlet40",
            include_str!("../../drivers/harrowdene-marlet40.toml"),
        )
    }

    fn vellisk() -> ConsoleDriver {
        shipped(
            "fenwhistle-vellisk5",
            include_str!("../../drivers/fenwhistle-vellisk5.toml"),
        )
    }

    fn row(d: &ConsoleDriver, line: &str) -> DeviceExchange {
        match classify(d, line) {
            Ok(ConsoleLine::Exchange(x)) => x,
            other => panic!("{line}: {other:?}"),
        }
    }

    #[test]
    fn burst_averages_and_distances_are_read_with_their_frames_and_no_gain() {
        let x = row(
            &marlet(),
            "mb avg_ps=17436.5 sd_ps=212.4 ok=61 rssi=-48.25 st=ok",
        );
        assert_eq!(
            x,
            DeviceExchange {
                rtt_ps: Some(17_436.5),
                frames: 61,
                dut_rssi_dbm: Some(-48.25),
                ..DeviceExchange::empty("ok")
            }
        );
        assert_eq!(row_form(&x), Ok(Some(RowForm::Rtt)));
        let none = row(&marlet(), "mb avg_ps=- sd_ps=- ok=0 rssi=- st=lost");
        assert_eq!(
            (none.frames, none.rtt_ps, row_form(&none)),
            (0, None, Ok(None))
        );
        // A negative distance is a reading, not an error.
        let d = row(
            &vellisk(),
            "vd mm=-215.5 sd_mm=30.1 n=40 rssi=-52 kapp_ps=2700 st=ok",
        );
        assert_eq!(
            (d.range_mm, d.applied_k_ps, d.frames, d.dut_gain),
            (Some(-215.5), Some(2700.0), 40, None)
        );
        assert_eq!(row_form(&d), Ok(Some(RowForm::Range)));
        // A range without its K, or an ok that carries nothing, matches no form: an error.
        let why = classify(&vellisk(), "vd mm=12 sd_mm=- n=3 rssi=- kapp_ps=- st=ok")
            .expect_err("no applied K");
        assert!(why.contains("no complete form"), "{why}");
        assert!(classify(&marlet(), "mb avg_ps=- sd_ps=- ok=3 rssi=- st=ok").is_err());
        assert!(
            classify(&marlet(), "mb avg_ps=1e999 sd_ps=- ok=3 rssi=- st=ok")
                .is_err_and(|w| w.contains("not a finite number"))
        );
    }

    #[test]
    fn centimetres_become_millimetres_and_a_declared_k_fills_in_but_may_not_be_contradicted() {
        let text = include_str!("../../drivers/fenwhistle-vellisk5.toml").replace(
            "range_unit = \"mm\"",
            "range_unit = \"cm\"\napplied_k_ps = 2700.0",
        );
        let d = shipped("cm", &text);
        let x = row(&d, "vd mm=12.5 sd_mm=- n=3 rssi=- kapp_ps=- st=ok");
        assert_eq!((x.range_mm, x.applied_k_ps), (Some(125.0), Some(2700.0)));
        assert_eq!(x.status, STATUS_OK);
        let agrees = row(&d, "vd mm=12.5 sd_mm=- n=3 rssi=- kapp_ps=2700 st=ok");
        assert_eq!(contradiction(&d, &[x, agrees]), None);
        let said = row(&d, "vd mm=12.5 sd_mm=- n=3 rssi=- kapp_ps=2650 st=ok");
        let why = contradiction(&d, std::slice::from_ref(&said))
            .expect("K differs from the declared one");
        assert!(
            why.contains("2650 ps, but its driver declares 2700 ps"),
            "{why}"
        );
        // Without a declaration there is nothing to contradict; the run watches for changes.
        assert_eq!(contradiction(&vellisk(), &[said]), None);
    }

    #[test]
    fn a_record_carries_one_form_or_none() {
        let wren = wren();
        let stamps = row(
            &wren,
            "xr 0 t1=5 t2=12 t3=60012 t4=59444 g=2 rssi=-61.25 rg=0 st=ok",
        );
        assert_eq!(row_form(&stamps), Ok(Some(RowForm::Timestamps)));
        let lost = row(&wren, "xr 1 t1=5 t2=- t3=- t4=- g=- rssi=- rg=- st=lost");
        assert_eq!(row_form(&lost), Ok(Some(RowForm::Timestamps)));
        assert_eq!(row_form(&DeviceExchange::empty("lost")), Ok(None));
        let mixed = DeviceExchange {
            rtt_ps: Some(1.0),
            ..stamps
        };
        assert!(row_form(&mixed).is_err_and(|w| w.contains("both timestamps and rtt")));
    }

    #[test]
    fn classifies_records_end_failure_and_banner() {
        let d = wren();
        let line = "xr 3 t1=281474976710000 t2=12 t3=60012 t4=59444 g=2 rssi=-61.25 rg=0 st=ok";
        assert_eq!(
            classify(&d, line),
            Ok(ConsoleLine::Exchange(DeviceExchange {
                t1_ps: Some(281_474_976_710_000),
                t2_ps: Some(12),
                t3_ps: Some(60_012),
                t4_ps: Some(59_444),
                dut_gain: Some(2),
                dut_rssi_dbm: Some(-61.25),
                ref_gain: Some(0),
                ..DeviceExchange::empty("ok")
            }))
        );
        let lost = "xr 4 t1=5 t2=- t3=- t4=- g=- rssi=- rg=- st=lost";
        let Ok(ConsoleLine::Exchange(x)) = classify(&d, lost) else {
            panic!("lost record");
        };
        assert_eq!(
            (x.t1_ps, x.t2_ps, x.status.as_str()),
            (Some(5), None, "lost")
        );
        assert_eq!(classify(&d, "range done n=16"), Ok(ConsoleLine::End));
        assert_eq!(
            classify(&d, "range fail radio busy"),
            Ok(ConsoleLine::Fail("radio busy".into()))
        );
        assert_eq!(classify(&d, "boot: rf cal ok"), Ok(ConsoleLine::Banner));
        assert_eq!(classify(&d, "what?"), Ok(ConsoleLine::Other));
        let bad = "xr 1 t1=99999999999999999999999 t2=1 t3=1 t4=1 g=0 rssi=-1 rg=0 st=ok";
        assert!(classify(&d, bad).is_err());
        // 2^48 is one past the counter's last value (IEEE 802.11-2016: 6-octet TOD/TOA).
        let wide = "xr 1 t1=1 t2=1 t3=281474976710656 t4=1 g=0 rssi=-1 rg=0 st=ok";
        assert_eq!(
            classify(&d, wide),
            Err("field `t3` = `281474976710656` is beyond the 48-bit counter (at most 281474976710655)".into())
        );
    }

    /// The Wren-6 driver with its burst and identity run as programs: `burst` is a /bin/sh
    /// script given the frames and the center frequency as its arguments `$1` and `$2`.
    fn wren_running(burst: &str) -> DrivenConsole {
        let text = include_str!("../../drivers/wren6-console.toml")
            .replace(
                "start_burst = \"range go n={frames} ch={center_mhz} bw={bw_mhz}\"",
                &format!(
                    "start_burst = {{ run = [\"/bin/sh\", \"-c\", '{burst}', \"sh\", \"{{frames}}\", \"{{center_mhz}}\"] }}"
                ),
            )
            .replace(
                "identify = \"who\"",
                "identify = { run = [\"/bin/sh\", \"-c\", \"echo 'fw 2.3.1 ready'; echo 'id W6-RUN'\"] }",
            );
        let driver = shipped("wren-run", &text);
        // Nothing listens here: a command that used the link would fail.
        let unused = crate::instrument::transport::Address::Tcp {
            host: "127.0.0.1".into(),
            port: 9,
        };
        let link = Link::new(unused, "\r\n", std::time::Duration::from_secs(5));
        DrivenConsole::new("dut", driver, link)
    }

    fn spec(frames: u32) -> BurstSpec {
        BurstSpec {
            frames,
            channel: crate::recipe::plan::Channel {
                center_mhz: 5180,
                bw_mhz: 80,
            },
        }
    }

    #[tokio::test]
    async fn a_burst_run_as_a_program_reads_its_stdout_as_the_replies() {
        let mut dut = wren_running(
            r#"echo "range ack"; i=0; while [ $i -lt $1 ]; do echo "xr $i t1=$((1000 + i)) t2=$2 t3=62000 t4=61500 g=1 rssi=-50 rg=0 st=ok"; i=$((i + 1)); done; echo "range done n=$1""#,
        );
        // The banner line the identity program prints first is its greeting, not a restart.
        assert_eq!(dut.identify().await, Ok("W6-RUN".to_string()));
        let rows = dut.burst(&spec(5)).await.expect("burst");
        assert_eq!(rows.len(), 5);
        assert_eq!(
            rows.iter().map(|x| x.t1_ps).collect::<Vec<_>>(),
            (1000..1005).map(Some).collect::<Vec<_>>()
        );
        // The center frequency arrived as its own argument.
        assert!(rows.iter().all(|x| x.t2_ps == Some(5180)));
    }

    #[tokio::test]
    async fn a_failing_or_short_program_is_an_instrument_error() {
        let mut dut =
            wren_running(r#"echo "range ack"; echo "radio locked by calibration" >&2; exit 4"#);
        let e = dut.burst(&spec(3)).await.expect_err("exit 4");
        assert!(matches!(e, InstrumentError::Failed { .. }), "{e}");
        let text = e.to_string();
        assert!(text.contains("exit status: 4"), "{text}");
        assert!(text.contains("radio locked by calibration"), "{text}");
        let mut short = wren_running(
            r#"echo "range ack"; echo "xr 0 t1=1 t2=2 t3=3 t4=4 g=1 rssi=-50 rg=0 st=ok""#,
        );
        let e = short.burst(&spec(3)).await.expect_err("no end line");
        assert!(matches!(e, InstrumentError::Transient { .. }), "{e}");
        assert!(e.to_string().contains("output ended early"), "{e}");
    }
}
