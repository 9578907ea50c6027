//! Injected faults for rehearsing unattended runs: dropped connections, reply timeouts, garbled
//! replies, DUT restarts and failed exchanges, drawn from their own seeded stream so the same seed
//! gives the same faults and the radio model's noise is untouched.

use super::truth::SimFaultsTruth;
use crate::instrument::InstrumentError;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Stream id of the fault draws (the model uses 0–5).
const STREAM_FAULTS: u64 = 6;

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

    /// The fault, if any, that strikes the next command sent to `role`. Draws the same amount
    /// whatever happens, so one fault never shifts the next.
    pub fn command(&mut self, role: &str) -> Result<(), InstrumentError> {
        self.commands += 1;
        let (timeout, garbled): (f64, f64) = (self.rng.random(), self.rng.random());
        let transient = |message: &str| InstrumentError::Transient {
            role: role.to_string(),
            message: message.to_string(),
        };
        let every = self.truth.drop_connection_every;
        if every > 0 && self.commands % every == 0 {
            return Err(transient("connection lost (simulated)"));
        }
        if timeout < self.truth.reply_timeout_rate {
            return Err(transient("no reply within the timeout (simulated)"));
        }
        if garbled < self.truth.garbled_reply_rate {
            return Err(transient("garbled reply (simulated)"));
        }
        Ok(())
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
            (0..200)
                .map(|_| f.command("attenuator").is_ok())
                .collect::<Vec<_>>()
        };
        assert_eq!(run(3), run(3));
        assert_ne!(run(3), run(4));
        let faults = run(3).iter().filter(|ok| !**ok).count();
        // Every 5th dropped (40) plus ~19 % of the rest: binomial bounds, generously.
        assert!((60..=110).contains(&faults), "{faults}");
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
