//! The simulated climatic chamber: air that ramps toward the setpoint at a limited rate, and a DUT
//! that follows the air with a first-order thermal lag. Pure: time comes in as bench time.

use super::truth::SimChamberTruth;

/// Integration step: short against any sensible DUT time constant (minutes).
const STEP_S: f64 = 1.0;

/// Chamber state.
#[derive(Debug, Clone, PartialEq)]
pub struct SimChamber {
    setpoint_c: f64,
    air_c: f64,
    dut_c: f64,
    ramp_c_per_s: f64,
    tau_s: f64,
    at_ps: u64,
}

impl SimChamber {
    /// A chamber at rest at its start temperature, at bench time 0.
    pub fn new(truth: &SimChamberTruth) -> Self {
        SimChamber {
            setpoint_c: truth.start_c,
            air_c: truth.start_c,
            dut_c: truth.start_c,
            ramp_c_per_s: truth.ramp_c_per_min / 60.0,
            tau_s: truth.dut_tau_s,
            at_ps: 0,
        }
    }

    /// Brings the state forward to bench time `now_ps` (earlier times leave it as it is).
    pub fn advance_to(&mut self, now_ps: u64) {
        let mut left_s = now_ps.saturating_sub(self.at_ps) as f64 * 1e-12;
        self.at_ps = self.at_ps.max(now_ps);
        while left_s > 0.0 {
            let dt = left_s.min(STEP_S);
            let gap = self.setpoint_c - self.air_c;
            let air_next = self.air_c + gap.signum() * gap.abs().min(self.ramp_c_per_s * dt);
            // Exact first-order response to the step's mean air temperature.
            let air_mean = (self.air_c + air_next) / 2.0;
            self.dut_c = air_mean + (self.dut_c - air_mean) * (-dt / self.tau_s).exp();
            self.air_c = air_next;
            left_s -= dt;
        }
    }

    /// Changes the setpoint at bench time `now_ps`.
    pub fn set_setpoint_c(&mut self, now_ps: u64, setpoint_c: f64) {
        self.advance_to(now_ps);
        self.setpoint_c = setpoint_c;
    }

    /// The setpoint.
    pub fn setpoint_c(&self) -> f64 {
        self.setpoint_c
    }

    /// Air temperature.
    pub fn air_c(&self) -> f64 {
        self.air_c
    }

    /// DUT temperature.
    pub fn dut_c(&self) -> f64 {
        self.dut_c
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn chamber() -> SimChamber {
        SimChamber::new(&SimChamberTruth {
            start_c: 25.0,
            ramp_c_per_min: 1e9,
            dut_tau_s: 300.0,
        })
    }

    const S: u64 = 1_000_000_000_000;

    #[test]
    fn the_dut_follows_a_step_with_a_first_order_lag() {
        // First-order step response (common practice): after one time constant the DUT has
        // covered 1 − 1/e = 63.2 % of the step, after five 99.3 %.
        let mut c = chamber();
        c.set_setpoint_c(0, 45.0);
        c.advance_to(300 * S);
        assert!(
            (c.dut_c() - (25.0 + 20.0 * (1.0 - (-1.0f64).exp()))).abs() < 0.05,
            "{}",
            c.dut_c()
        );
        c.advance_to(1500 * S);
        assert!(
            (c.dut_c() - (45.0 - 20.0 * (-5.0f64).exp())).abs() < 0.05,
            "{}",
            c.dut_c()
        );
        assert_eq!(c.air_c(), 45.0);
    }

    #[test]
    fn the_air_ramps_at_its_rate() {
        let mut c = SimChamber::new(&SimChamberTruth {
            start_c: 25.0,
            ramp_c_per_min: 2.0,
            dut_tau_s: 300.0,
        });
        c.set_setpoint_c(0, 15.0);
        c.advance_to(150 * S);
        assert!((c.air_c() - 20.0).abs() < 1e-9, "{}", c.air_c());
        c.advance_to(600 * S);
        assert_eq!(c.air_c(), 15.0);
        assert!(c.dut_c() > 15.0, "the DUT lags the air");
    }
}
