//! Injected faults for rehearsing unattended runs: dropped connections, reply timeouts, garbled
//! replies, DUT restarts and failed exchanges, drawn from their own seeded stream so the same seed
//! gives the same faults and the radio model's noise is untouched.

use super::truth::SimFaultsTruth;
use crate::instrument::InstrumentError;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Stream id of the fault draws (the model uses 0–5).
const STREAM_FAULTS: u64 = 6;

/// A fault that strikes one command.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum CommandFault {
    /// The connection drops before the command is carried out.
    Drop,
    /// The command is not carried out and nothing answers it.
    Silence,
    /// The command is carried out but its reply arrives corrupted.
    Garble,
}

impl CommandFault {
    /// What the client sees, as an in-process instrument reports it.
    pub fn describe(self) -> &'static str {
        match self {
            CommandFault::Drop => "connection lost (simulated)",
            CommandFault::Silence => "no reply within the timeout (simulated)",
            CommandFault::Garble => "garbled reply (simulated)",
        }
    }

    /// The error an in-process instrument in `role` returns for this fault.
    pub fn error(self, role: &str) -> InstrumentError {
        InstrumentError::Transient {
            role: role.to_string(),
            message: self.describe().to_string(),
        }
    }
}

/// Corrupts a reply as a noisy line would, keeping its line ends so the client stays in step:
/// every other character becomes `#`. No reply of the simulated instruments survives it.
pub fn garble(reply: &mut [u8]) {
    for b in reply.iter_mut().step_by(2) {
        if !matches!(*b, b'\r' | b'\n') {
            *b = b'#';
        }
    }
}

/// Decides, command by command, which fault strikes.
#[derive(Debug, Clone)]
pub struct FaultInjector {
    truth: SimFaultsTruth,
    rng: ChaCha8Rng,
    commands: u64,
    exchanges: u64,
    dut_ready: bool,
}

impl FaultInjector {
    /// An injector for `truth`, seeded like the model.
    pub fn new(truth: &SimFaultsTruth, seed: u64) -> Self {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        rng.set_stream(STREAM_FAULTS);
        FaultInjector {
            truth: truth.clone(),
            rng,
            commands: 0,
            exchanges: 0,
            dut_ready: true,
        }
    }

    /// The fault, if any, that strikes the next command. Draws the same amount whatever
    /// happens, so one fault never shifts the next.
    pub fn command(&mut self) -> Option<CommandFault> {
        self.commands += 1;
        let (timeout, garbled): (f64, f64) = (self.rng.random(), self.rng.random());
        let every = self.truth.drop_connection_every;
        if every > 0 && self.commands % every == 0 {
            Some(CommandFault::Drop)
        } else if timeout < self.truth.reply_timeout_rate {
            Some(CommandFault::Silence)
        } else if garbled < self.truth.garbled_reply_rate {
            Some(CommandFault::Garble)
        } else {
            None
        }
    }

    /// Before a burst of `frames`: fails if the DUT is unconfigured, or restarts it when the
    /// burst would cross a restart point (the burst is lost).
    pub fn burst(&mut self, frames: u32) -> Result<(), InstrumentError> {
        if !self.dut_ready {
            return Err(InstrumentError::Failed {
                role: "dut".into(),
                message: "not configured since it restarted (simulated)".into(),
            });
        }
        let every = self.truth.dut_restart_every;
        let before = self.exchanges;
        self.exchanges += u64::from(frames);
        if every > 0 && before / every != self.exchanges / every {
            self.dut_ready = false;
            return Err(InstrumentError::Restarted { role: "dut".into() });
        }
        Ok(())
    }

    /// The DUT was initialised again (identified and configured).
    pub fn dut_initialised(&mut self) {
        self.dut_ready = true;
    }

    /// Whether the exchange about to be reported fails.
    pub fn exchange_fails(&mut self) -> bool {
        self.rng.random::<f64>() < self.truth.failed_exchange_rate
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn truth() -> SimFaultsTruth {
        SimFaultsTruth {
            drop_connection_every: 5,
            reply_timeout_rate: 0.1,
            garbled_reply_rate: 0.1,
            dut_restart_every: 100,
            failed_exchange_rate: 0.05,
        }
    }

    #[test]
    fn same_seed_same_faults() {
        let run = |seed| {
            let mut f = FaultInjector::new(&truth(), seed);
            (0..200).map(|_| f.command().is_none()).collect::<Vec<_>>()
        };
        assert_eq!(run(3), run(3));
        assert_ne!(run(3), run(4));
        let faults = run(3).iter().filter(|ok| !**ok).count();
        // Every 5th dropped (40) plus ~19 % of the rest: binomial bounds, generously.
        assert!((60..=110).contains(&faults), "{faults}");
    }

    #[test]
    fn a_garbled_reply_keeps_its_line_end_and_loses_its_meaning() {
        let mut one = b"1\n".to_vec();
        garble(&mut one);
        assert_eq!(one, b"#\n");
        let mut line = b"range ack\r\n".to_vec();
        garble(&mut line);
        assert_eq!(line, b"#a#g# #c#\r\n");
    }

    #[test]
    fn a_restart_loses_the_burst_and_needs_initialising() {
        let mut f = FaultInjector::new(&truth(), 1);
        for _ in 0..6 {
            assert!(f.burst(16).is_ok());
        }
        assert_eq!(
            f.burst(16),
            Err(InstrumentError::Restarted { role: "dut".into() })
        );
        assert!(matches!(f.burst(16), Err(InstrumentError::Failed { .. })));
        f.dut_initialised();
        assert!(f.burst(16).is_ok());
    }
}
