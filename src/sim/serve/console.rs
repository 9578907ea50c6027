//! The simulated DUT's line console. Every simulated device takes the command set
//! `drivers/wren6-console.toml` describes — a boot banner, `who`, `range go n= ch= bw=`,
//! `range halt`, `temp?` — and answers in the lines of the device its `[sim.dut] reports` form
//! stands for: the Wren-6's timestamp records (or, in its per-frame RTT mode, RTT records), the
//! Marlet-40's burst averages (`drivers/harrowdene-marlet40.toml`) or the Vellisk-5's distances
//! (`drivers/fenwhistle-vellisk5.toml`). Encoding and parsing are pure functions; [`serve`]
//! moves lines over any byte stream (TCP or a pty) and applies `[sim.faults]` on the wire. A
//! restart prints the banner again in place of the burst.

use super::{CommandReader, Medium};
use crate::data::DeviceExchange;
use crate::instrument::InstrumentError;
use crate::sim::device_report::{DeviceReport, MM_PER_RTT_PS};
use crate::sim::faults::{garble, CommandFault};
use crate::sim::front::SimShared;
use crate::sim::{BurstRequest, DutReports};
use std::fmt::Write as _;
use tokio::io::{AsyncRead, AsyncWrite, AsyncWriteExt};

/// Lines the Wren-6 console prints when it starts: unsolicited, before any command.
pub const BANNER: [&str; 3] = [
    "Wren-6 ranging module debug console (simulated by taucal)",
    "boot: rf calibration loaded",
    "fw 2.3.1 ready",
];

/// The Marlet-40's start-up lines.
pub const MARLET_BANNER: [&str; 2] = [
    "Harrowdene Marlet-40 station shell (simulated by taucal)",
    "marlet: ranging service up",
];

/// The Vellisk-5's start-up lines.
pub const VELLISK_BANNER: [&str; 2] = [
    "Fenwhistle Vellisk-5 test bridge (simulated by taucal)",
    "vellisk: ranging ready",
];

/// The device a served console stands for: which lines it answers in, and its serial number.
#[derive(Debug, Clone, PartialEq)]
pub struct ConsoleDevice {
    reports: DutReports,
    serial: Option<String>,
}

impl ConsoleDevice {
    /// The device for `[sim.dut] reports` and `serial`.
    pub fn new(reports: DutReports, serial: Option<String>) -> Self {
        ConsoleDevice { reports, serial }
    }

    /// The lines it prints when it starts.
    pub fn banner(&self) -> &'static [&'static str] {
        match self.reports {
            DutReports::Timestamps | DutReports::RttFrames => &BANNER,
            DutReports::RttBurst => &MARLET_BANNER,
            DutReports::RangeBurst => &VELLISK_BANNER,
        }
    }

    /// Its answer to `who`.
    pub fn identity(&self) -> String {
        let (maker, model, default_serial, firmware) = match self.reports {
            DutReports::Timestamps => ("Saltmarsh Radio Lab", "Wren-6", "SIM-0006", "fw2.3.1"),
            DutReports::RttFrames => ("Saltmarsh Radio Lab", "Wren-6", "SIM-0006", "fw2.3.1-rtt"),
            DutReports::RttBurst => ("Harrowdene Wireless", "Marlet-40", "SIM-0040", "sw5.1"),
            DutReports::RangeBurst => ("Fenwhistle Devices", "Vellisk-5", "SIM-0005", "build11"),
        };
        let serial = self.serial.as_deref().unwrap_or(default_serial);
        format!(
            "id {maker},{model},{serial},{firmware} (simulated by taucal {})",
            env!("CARGO_PKG_VERSION")
        )
    }

    /// The `seq`-th row of a burst as this device prints it; `spread_ps` is the spread of the
    /// frames behind a burst average.
    pub fn format_row(&self, seq: usize, x: &DeviceExchange, spread_ps: Option<f64>) -> String {
        match self.reports {
            DutReports::Timestamps => format_exchange(seq, x),
            DutReports::RttFrames => format_rtt_frame(seq, x),
            DutReports::RttBurst => format_rtt_burst(x, spread_ps),
            DutReports::RangeBurst => format_range_burst(x, spread_ps),
        }
    }

    /// All lines of a burst's reply: acknowledgement, rows, end.
    fn burst_lines(&self, report: &DeviceReport) -> Vec<String> {
        let mut lines = Vec::with_capacity(report.rows.len() + 2);
        lines.push("range ack".to_string());
        lines.extend(
            report
                .rows
                .iter()
                .enumerate()
                .map(|(k, x)| self.format_row(k, x, report.spread_ps)),
        );
        lines.push(format!("range done n={}", report.rows.len()));
        lines
    }
}

/// Exchanges per burst the console accepts: the Wren-6's `[limits] frames` in
/// `drivers/wren6-console.toml`. The served console refuses what the device would, so no
/// request can make the server build an endless burst.
pub const FRAMES: [u32; 2] = [1, 1024];
/// Center frequencies it accepts, MHz (the driver file's `center_mhz`).
pub const CENTER_MHZ: [u32; 2] = [2412, 7115];
/// Bandwidths it accepts, MHz (the driver file's `bw_mhz`).
pub const BW_MHZ: [u32; 4] = [20, 40, 80, 160];

/// A console command.
#[derive(Debug, Clone, PartialEq)]
pub enum ConsoleCommand {
    /// `who`
    Identify,
    /// `range go n=N ch=MHZ bw=MHZ`
    Burst(BurstRequest),
    /// `range halt`
    Halt,
    /// `temp?`
    Temperature,
}

/// Parses a command line; `Err` carries the reply for a line that is not one.
pub fn parse_command(line: &str) -> Result<ConsoleCommand, String> {
    let words: Vec<&str> = line.split_whitespace().collect();
    match words.as_slice() {
        ["who"] => Ok(ConsoleCommand::Identify),
        ["range", "halt"] => Ok(ConsoleCommand::Halt),
        ["temp?"] => Ok(ConsoleCommand::Temperature),
        ["range", "go", args @ ..] => {
            let mut n = None;
            let mut ch = None;
            let mut bw = None;
            for arg in args {
                let (key, value) = arg.split_once('=').ok_or("range fail bad argument")?;
                let value: u32 = value.parse().map_err(|_| "range fail bad number")?;
                match key {
                    "n" => n = Some(value),
                    "ch" => ch = Some(value),
                    "bw" => bw = Some(value),
                    _ => return Err("range fail unknown argument".into()),
                }
            }
            let (Some(frames), Some(center_mhz), Some(bw_mhz)) = (n, ch, bw) else {
                return Err("range fail need n, ch and bw".into());
            };
            if !(FRAMES[0]..=FRAMES[1]).contains(&frames) {
                return Err(format!("range fail n must be {}..{}", FRAMES[0], FRAMES[1]));
            }
            if !(CENTER_MHZ[0]..=CENTER_MHZ[1]).contains(&center_mhz) {
                return Err(format!(
                    "range fail ch must be {}..{}",
                    CENTER_MHZ[0], CENTER_MHZ[1]
                ));
            }
            if !BW_MHZ.contains(&bw_mhz) {
                return Err("range fail bw must be 20, 40, 80 or 160".into());
            }
            Ok(ConsoleCommand::Burst(BurstRequest {
                frames,
                center_mhz,
                bw_mhz,
            }))
        }
        _ => Err(format!("err unknown command `{}`", line.trim())),
    }
}

fn opt<T: std::fmt::Display>(v: Option<T>) -> String {
    v.map_or_else(|| "-".to_string(), |v| v.to_string())
}

/// One exchange as the console prints it. RSSI is written in Rust's shortest round-trip form,
/// so the client reads back exactly the value the model produced.
pub fn format_exchange(seq: usize, x: &DeviceExchange) -> String {
    let mut s = String::with_capacity(128);
    let _ = write!(
        s,
        "xr {seq} t1={} t2={} t3={} t4={} g={} rssi={} rg={} st={}",
        opt(x.t1_ps),
        opt(x.t2_ps),
        opt(x.t3_ps),
        opt(x.t4_ps),
        opt(x.dut_gain),
        opt(x.dut_rssi_dbm),
        opt(x.ref_gain),
        x.status
    );
    s
}

/// One exchange's per-frame RTT record (the Wren-6 in its RTT mode): no timestamps.
pub fn format_rtt_frame(seq: usize, x: &DeviceExchange) -> String {
    format!(
        "xr {seq} rtt={} g={} rssi={} rg={} st={}",
        opt(x.rtt_ps),
        opt(x.dut_gain),
        opt(x.dut_rssi_dbm),
        opt(x.ref_gain),
        x.status
    )
}

/// A gain index, where the row has one, as the burst devices append it.
fn trailing_gain(x: &DeviceExchange) -> String {
    x.dut_gain.map_or_else(String::new, |g| format!(" g={g}"))
}

/// A burst average as the Marlet-40 prints it: mean RTT and its spread in ps, the frames kept,
/// mean RSSI. Values the reader takes back are in Rust's shortest round-trip form.
pub fn format_rtt_burst(x: &DeviceExchange, spread_ps: Option<f64>) -> String {
    format!(
        "mb avg_ps={} sd_ps={} ok={} rssi={} st={}{}",
        opt(x.rtt_ps),
        spread_ps.map_or_else(|| "-".to_string(), |s| format!("{s:.1}")),
        x.frames,
        opt(x.dut_rssi_dbm),
        x.status,
        trailing_gain(x)
    )
}

/// A burst's distance as the Vellisk-5 prints it: millimetres with their spread, the frames
/// kept, mean RSSI, and the K it removed.
pub fn format_range_burst(x: &DeviceExchange, spread_ps: Option<f64>) -> String {
    format!(
        "vd mm={} sd_mm={} n={} rssi={} kapp_ps={} st={}{}",
        opt(x.range_mm),
        spread_ps.map_or_else(|| "-".to_string(), |s| format!("{:.1}", s * MM_PER_RTT_PS)),
        x.frames,
        opt(x.dut_rssi_dbm),
        opt(x.applied_k_ps),
        x.status,
        trailing_gain(x)
    )
}

/// Answers one command on the shared model as `device`; returns the reply lines and the wall
/// time to wait before sending the burst's end (a paced burst).
pub fn answer(
    shared: &SimShared,
    device: &ConsoleDevice,
    line: &str,
) -> (Vec<String>, std::time::Duration) {
    let none = std::time::Duration::ZERO;
    match parse_command(line) {
        Err(reply) => (vec![reply], none),
        Ok(ConsoleCommand::Identify) => match shared.dut_initialised() {
            Ok(()) => (vec![device.identity()], none),
            Err(e) => (vec![format!("err {e}")], none),
        },
        Ok(ConsoleCommand::Halt) => (vec!["ok".into()], none),
        Ok(ConsoleCommand::Temperature) => match shared.dut_temp_c() {
            Ok(t) => (vec![format!("temp {}", opt(t))], none),
            Err(e) => (vec![format!("err {e}")], none),
        },
        Ok(ConsoleCommand::Burst(request)) => match shared.run_burst(&request) {
            Ok((report, wall)) => (device.burst_lines(&report), wall),
            Err(InstrumentError::Restarted { .. }) => (
                device.banner().iter().map(|l| l.to_string()).collect(),
                none,
            ),
            Err(e) => (vec![format!("range fail {e}")], none),
        },
    }
}

/// Serves the console on `stream` until it closes (or a simulated fault drops it on a
/// socket): banner first, then one reply per command. Each reply line is written in two pieces, as a slow UART bridge would deliver it, so clients
/// always meet lines split across reads.
pub async fn serve<S: AsyncRead + AsyncWrite + Unpin>(
    mut stream: S,
    shared: SimShared,
    device: ConsoleDevice,
    medium: Medium,
) -> std::io::Result<()> {
    for line in device.banner() {
        stream.write_all(format!("{line}\r\n").as_bytes()).await?;
    }
    stream.flush().await?;
    let mut commands = CommandReader::default();
    while let Some(line) = commands.next(&mut stream).await? {
        if line.trim().is_empty() {
            continue;
        }
        let fault = shared.command_fault("dut").ok().flatten();
        match fault {
            Some(CommandFault::Drop) if medium == Medium::Socket => return Ok(()),
            Some(CommandFault::Drop | CommandFault::Silence) => continue,
            _ => {}
        }
        let (mut replies, wall) = answer(&shared, &device, &line);
        if fault == Some(CommandFault::Garble) {
            // The middle line: a record in a burst, the only line of any other reply.
            let middle = replies.len() / 2;
            if let Some(reply) = replies.get_mut(middle) {
                let mut bytes = std::mem::take(reply).into_bytes();
                garble(&mut bytes);
                *reply = String::from_utf8_lossy(&bytes).into_owned();
            }
        }
        let last = replies.len().saturating_sub(1);
        for (i, reply) in replies.iter().enumerate() {
            if i == last && !wall.is_zero() {
                tokio::time::sleep(wall).await;
            }
            let text = format!("{reply}\r\n");
            let (head, tail) = text.split_at(text.len() / 2);
            stream.write_all(head.as_bytes()).await?;
            stream.flush().await?;
            stream.write_all(tail.as_bytes()).await?;
        }
        stream.flush().await?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_commands_and_refuses_the_rest() {
        assert_eq!(
            parse_command("range go n=16 ch=5180 bw=80"),
            Ok(ConsoleCommand::Burst(BurstRequest {
                frames: 16,
                center_mhz: 5180,
                bw_mhz: 80
            }))
        );
        assert_eq!(parse_command("who"), Ok(ConsoleCommand::Identify));
        assert_eq!(parse_command("range halt"), Ok(ConsoleCommand::Halt));
        assert!(parse_command("range go n=0 ch=5180 bw=80").is_err());
        // A burst the device could not run is refused before any of it is built.
        assert_eq!(
            parse_command("range go n=100000000 ch=5180 bw=80"),
            Err("range fail n must be 1..1024".into())
        );
        assert!(parse_command("range go n=1024 ch=7115 bw=160").is_ok());
        assert!(parse_command("range go n=16 ch=7200 bw=80").is_err());
        assert!(parse_command("range go n=16 ch=5180 bw=320").is_err());
        assert!(parse_command("range go n=x").is_err());
        assert!(parse_command("launch").is_err_and(|r| r.starts_with("err unknown command")));
    }

    /// A shipped console driver, parsed; `edit` may change its text first.
    fn driver_from(
        name: &str,
        text: &str,
        edit: impl FnOnce(String) -> String,
    ) -> Box<crate::instrument::driver_file::ConsoleDriver> {
        use crate::diagnostic::SourceFile;
        use crate::instrument::driver_file::{DriverFile, DriverKind};
        match DriverFile::parse(name, SourceFile::new(name, edit(text.to_string()))) {
            Ok(DriverFile {
                kind: DriverKind::RangingConsole(driver),
                ..
            }) => driver,
            _ => panic!("{name} loads as a console driver"),
        }
    }

    /// The shipped console driver the served console stands in for.
    fn shipped_driver() -> Box<crate::instrument::driver_file::ConsoleDriver> {
        driver_from(
            "wren6-console",
            include_str!("../../../drivers/wren6-console.toml"),
            |t| t,
        )
    }

    fn marlet() -> Box<crate::instrument::driver_file::ConsoleDriver> {
        driver_from(
            "harrowdene-marlet40",
            include_str!("../../../drivers/harrowdene-marlet40.toml"),
            |t| t,
        )
    }

    fn vellisk() -> Box<crate::instrument::driver_file::ConsoleDriver> {
        driver_from(
            "fenwhistle-vellisk5",
            include_str!("../../../drivers/fenwhistle-vellisk5.toml"),
            |t| t,
        )
    }

    /// The Wren-6 driver with its exchange pattern for the RTT mode's records.
    fn wren_rtt() -> Box<crate::instrument::driver_file::ConsoleDriver> {
        driver_from(
            "wren6-console",
            include_str!("../../../drivers/wren6-console.toml"),
            |t| {
                let start = t.find("exchange = ").expect("exchange pattern");
                let end = start + t[start..].find('\n').expect("line end");
                let rtt = r"exchange = '^xr (?P<seq>\d+) rtt=(?P<rtt>[-+0-9.eE]+|-) g=(?P<gain>\d+|-) rssi=(?P<rssi>[-+0-9.eE]+|-) rg=(?P<ref_gain>\d+|-) st=(?P<status>[a-z_]+)$'";
                format!("{}{rtt}{}", &t[..start], &t[end..])
            },
        )
    }

    #[test]
    fn the_served_limits_are_the_shipped_drivers() {
        for driver in [shipped_driver(), marlet(), vellisk()] {
            assert_eq!(driver.frames, FRAMES);
            assert_eq!(driver.center_mhz, CENTER_MHZ);
            assert_eq!(driver.bw_mhz, BW_MHZ);
        }
    }

    #[test]
    fn what_the_console_prints_the_shipped_driver_reads_back_exactly() {
        use crate::instrument::driven_console::{classify, ConsoleLine};
        let driver = shipped_driver();
        let x = DeviceExchange {
            t1_ps: Some(281_474_976_710_655),
            t2_ps: Some(7),
            t3_ps: Some(60_007),
            t4_ps: Some(123),
            dut_gain: Some(1),
            dut_rssi_dbm: Some(-47.123_456_789_012_34),
            ref_gain: Some(0),
            ..DeviceExchange::empty("ok")
        };
        assert_eq!(
            classify(&driver, &format_exchange(0, &x)),
            Ok(ConsoleLine::Exchange(x))
        );
        for line in BANNER {
            assert_eq!(classify(&driver, line), Ok(ConsoleLine::Banner), "{line}");
        }
    }

    /// Rows the simulated DUT reports in `form` over a sweep from a strong link to no link.
    fn simulated(form: DutReports) -> Vec<(DeviceExchange, Option<f64>)> {
        use crate::bench::PathFacts;
        use crate::sim::{SimBench, SimTruth};
        let mut truth: SimTruth = toml::from_str(
            r#"
            [dut]
            tx_delay_ps = 1320.0
            rx_delay_ps = [780.0, 1010.0]
            gain_thresholds_dbm = [-50.0]
            clock_ppm = -12.0
            outlier_rate = 0.05
            [reference]
            delay_ps = 2650.0
            "#,
        )
        .expect("truth");
        truth.dut.reports = form;
        truth.dut.reports_gain = !form.per_burst();
        truth.dut.applied_k_ps = (form == DutReports::RangeBurst).then_some(31_234.567);
        let path = PathFacts {
            cable_delay_ps: 5400.0,
            fixed_loss_db: 7.0,
            atten_delay_ps_per_db: 0.0,
        };
        let mut sim = SimBench::new(&truth, &path, 3).expect("sim");
        let request = BurstRequest {
            frames: 24,
            center_mhz: 5180,
            bw_mhz: 80,
        };
        let mut rows = Vec::new();
        for (k, atten_db) in [10.0, 45.0, 80.0, 91.0, 140.0].into_iter().enumerate() {
            sim.set_atten_db(atten_db);
            let out = sim.run_burst(k as u64 * 100_000_000_000, &request);
            let report = sim.report(out.exchanges, &request);
            rows.extend(report.rows.into_iter().map(|x| (x, report.spread_ps)));
        }
        rows
    }

    #[test]
    fn every_form_the_console_prints_its_driver_reads_back_exactly() {
        use crate::instrument::driven_console::{classify, ConsoleLine};
        for (form, driver) in [
            (DutReports::RttFrames, wren_rtt()),
            (DutReports::RttBurst, marlet()),
            (DutReports::RangeBurst, vellisk()),
        ] {
            let device = ConsoleDevice::new(form, Some("SN-1".into()));
            let rows = simulated(form);
            assert!(rows.iter().any(|(x, _)| x.status == "ok"), "{form:?}");
            assert!(rows.iter().any(|(x, _)| x.status == "lost"), "{form:?}");
            if form == DutReports::RangeBurst {
                // K_app above the whole round trip: every distance is negative, and kept.
                assert!(rows
                    .iter()
                    .any(|(x, _)| x.range_mm.is_some_and(|d| d < 0.0)));
            }
            for (seq, (x, spread_ps)) in rows.into_iter().enumerate() {
                let line = device.format_row(seq, &x, spread_ps);
                assert_eq!(
                    classify(&driver, &line),
                    Ok(ConsoleLine::Exchange(x)),
                    "{line}"
                );
            }
            for line in device.banner() {
                assert_eq!(classify(&driver, line), Ok(ConsoleLine::Banner), "{line}");
            }
            let id = device.identity();
            assert!(id.contains(",SN-1,"), "{id}");
            assert!(driver.identify_reply.is_match(&id), "{id}");
        }
    }

    #[test]
    fn a_burst_device_prints_a_gain_index_only_where_it_has_one() {
        let x = DeviceExchange {
            rtt_ps: Some(17_000.25),
            frames: 12,
            dut_gain: Some(2),
            ..DeviceExchange::empty("ok")
        };
        assert_eq!(
            format_rtt_burst(&x, Some(210.04)),
            "mb avg_ps=17000.25 sd_ps=210.0 ok=12 rssi=- st=ok g=2"
        );
        let none = DeviceExchange {
            frames: 0,
            ..DeviceExchange::empty("lost")
        };
        assert_eq!(
            format_range_burst(&none, None),
            "vd mm=- sd_mm=- n=0 rssi=- kapp_ps=- st=lost"
        );
    }
}
