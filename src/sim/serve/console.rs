//! The simulated DUT's line console, speaking the protocol `drivers/wren6-console.toml`
//! describes: a boot banner, `who`, `range go n= ch= bw=`, `range halt`, `temp?`. Encoding and
//! parsing are pure functions; [`serve`] moves lines over any byte stream (TCP or a pty) and
//! applies `[sim.faults]` on the wire. A restart prints the banner again in place of the burst.

use super::{CommandReader, Medium};
use crate::data::DeviceExchange;
use crate::instrument::InstrumentError;
use crate::sim::faults::{garble, CommandFault};
use crate::sim::front::SimShared;
use crate::sim::BurstRequest;
use std::fmt::Write as _;
use tokio::io::{AsyncRead, AsyncWrite, AsyncWriteExt};

/// Lines the console prints when it starts: unsolicited, before any command.
pub const BANNER: [&str; 3] = [
    "Wren-6 ranging module debug console (simulated by taucal)",
    "boot: rf calibration loaded",
    "fw 2.3.1 ready",
];

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

/// Answers one command on the shared model; returns the reply lines and the wall time to wait
/// before sending the burst's end (a paced burst).
pub fn answer(shared: &SimShared, line: &str) -> (Vec<String>, std::time::Duration) {
    let none = std::time::Duration::ZERO;
    match parse_command(line) {
        Err(reply) => (vec![reply], none),
        Ok(ConsoleCommand::Identify) => match shared.dut_initialised() {
            Ok(()) => (
                vec![format!(
                    "id Saltmarsh Radio Lab,Wren-6,SIM-0006,fw2.3.1 (simulated by taucal {})",
                    env!("CARGO_PKG_VERSION")
                )],
                none,
            ),
            Err(e) => (vec![format!("err {e}")], none),
        },
        Ok(ConsoleCommand::Halt) => (vec!["ok".into()], none),
        Ok(ConsoleCommand::Temperature) => match shared.dut_temp_c() {
            Ok(t) => (vec![format!("temp {}", opt(t))], none),
            Err(e) => (vec![format!("err {e}")], none),
        },
        Ok(ConsoleCommand::Burst(request)) => match shared.run_burst(&request) {
            Ok((exchanges, wall)) => {
                let mut lines = Vec::with_capacity(exchanges.len() + 2);
                lines.push("range ack".to_string());
                lines.extend(
                    exchanges
                        .iter()
                        .enumerate()
                        .map(|(k, x)| format_exchange(k, x)),
                );
                lines.push(format!("range done n={}", exchanges.len()));
                (lines, wall)
            }
            Err(InstrumentError::Restarted { .. }) => {
                (BANNER.iter().map(|l| l.to_string()).collect(), none)
            }
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
    medium: Medium,
) -> std::io::Result<()> {
    for line in BANNER {
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
        let (mut replies, wall) = answer(&shared, &line);
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

    /// The shipped console driver the served console stands in for.
    fn shipped_driver() -> Box<crate::instrument::driver_file::ConsoleDriver> {
        use crate::diagnostic::SourceFile;
        use crate::instrument::driver_file::{DriverFile, DriverKind};
        let text = include_str!("../../../drivers/wren6-console.toml");
        let Ok(DriverFile {
            kind: DriverKind::RangingConsole(driver),
            ..
        }) = DriverFile::parse("wren6-console", SourceFile::new("wren6-console.toml", text))
        else {
            panic!("driver");
        };
        driver
    }

    #[test]
    fn the_served_limits_are_the_shipped_drivers() {
        let driver = shipped_driver();
        assert_eq!(driver.frames, FRAMES);
        assert_eq!(driver.center_mhz, CENTER_MHZ);
        assert_eq!(driver.bw_mhz, BW_MHZ);
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
}
