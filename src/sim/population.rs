//! A simulated fleet: how units vary around a bench's `[sim.dut]` (`[sim.population]`), and the
//! stations of a line whose true path differs from the one they declare (`[sim.stations.NAME]`).
//! Each unit's truth is drawn from its own random stream under the fleet's seed, so unit `i`
//! is the same unit whatever order, or however many threads, the fleet is run in.

use super::truth::{non_negative, SimPath, SimTruth};
use crate::bench::PathFacts;
use crate::diagnostic::KeyError;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use serde::Deserialize;

/// `[sim.population]`: standard deviations of the unit-to-unit spread, all 1 sigma, Gaussian.
#[derive(Debug, Clone, Default, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimPopulation {
    /// An offset of the unit's K shared by all its gain states.
    #[serde(default)]
    pub unit_sd_ps: f64,
    /// The TX chain's delay.
    #[serde(default)]
    pub tx_delay_sd_ps: f64,
    /// Each gain state's RX delay, independently.
    #[serde(default)]
    pub rx_delay_sd_ps: f64,
    /// A shift of all the AGC's switch points together (the unit's receive-level calibration
    /// error), dB.
    #[serde(default)]
    pub threshold_sd_db: f64,
    /// The DUT's clock offset, ppm.
    #[serde(default)]
    pub clock_ppm_sd: f64,
}

/// `[sim.stations.NAME]`: one station of a simulated line.
#[derive(Debug, Clone, Default, PartialEq, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimStation {
    /// How much the station's true one-way path delay exceeds the one its bench declares
    /// (a cable swapped, a fixture's delay entered wrong); it shows in K as twice this.
    #[serde(default)]
    pub path_error_ps: f64,
}

/// The largest clock offset the simulator accepts (its `[sim.dut] clock_ppm` limit).
const CLOCK_LIMIT_PPM: f64 = 200.0;

impl SimPopulation {
    /// Checks every spread is a finite, non-negative number.
    pub fn validate(&self) -> Result<(), KeyError> {
        non_negative("sim.population.unit_sd_ps", self.unit_sd_ps)?;
        non_negative("sim.population.tx_delay_sd_ps", self.tx_delay_sd_ps)?;
        non_negative("sim.population.rx_delay_sd_ps", self.rx_delay_sd_ps)?;
        non_negative("sim.population.threshold_sd_db", self.threshold_sd_db)?;
        non_negative("sim.population.clock_ppm_sd", self.clock_ppm_sd)
    }

    /// Unit `index` of the fleet seeded `fleet_seed`: `base` with its DUT's delays, switch
    /// points and clock drawn around `base`'s. The unit-wide offset sits on the TX delay, as
    /// only the sum of TX and RX is observable.
    pub fn draw(&self, base: &SimTruth, fleet_seed: u64, index: u64) -> SimTruth {
        let mut rng = ChaCha8Rng::seed_from_u64(fleet_seed);
        rng.set_stream(index);
        let mut normal = || -> f64 { StandardNormal.sample(&mut rng) };
        let mut t = base.clone();
        let d = &mut t.dut;
        d.tx_delay_ps += self.unit_sd_ps * normal() + self.tx_delay_sd_ps * normal();
        for rx in &mut d.rx_delay_ps {
            *rx += self.rx_delay_sd_ps * normal();
        }
        let shift_db = self.threshold_sd_db * normal();
        for th in &mut d.gain_thresholds_dbm {
            *th += shift_db;
        }
        // Clamped so a wide spread cannot draw a clock the simulator refuses.
        d.clock_ppm =
            (d.clock_ppm + self.clock_ppm_sd * normal()).clamp(-CLOCK_LIMIT_PPM, CLOCK_LIMIT_PPM);
        t
    }
}

/// `truth` as seen on a station whose true one-way path is `path_error_ps` longer than
/// `declared` says.
pub fn on_station(truth: &SimTruth, declared: &PathFacts, path_error_ps: f64) -> SimTruth {
    let mut t = truth.clone();
    let true_cable = truth.true_path(declared).cable_delay_ps + path_error_ps;
    t.path = Some(SimPath {
        cable_delay_ps: true_cable,
    });
    t
}

#[cfg(test)]
mod tests {
    use super::*;

    const BASE: &str = r#"
        [dut]
        tx_delay_ps = 1500.0
        rx_delay_ps = [900.0, 1150.0, 1400.0]
        gain_thresholds_dbm = [-30.0, -55.0]
        clock_ppm = 8.0
        [reference]
        delay_ps = 2800.0
        [population]
        unit_sd_ps = 20.0
        tx_delay_sd_ps = 15.0
        rx_delay_sd_ps = 10.0
        threshold_sd_db = 1.0
        clock_ppm_sd = 2.0
        [stations.line-a]
        path_error_ps = 40.0
    "#;

    fn base() -> SimTruth {
        let t: SimTruth = toml::from_str(BASE).expect("parses");
        t.validate().expect("valid");
        t
    }

    #[test]
    fn a_unit_is_the_same_unit_whatever_order_it_is_drawn_in() {
        let t = base();
        let p = t.population.clone().expect("population");
        let a = p.draw(&t, 9, 3);
        let _ = p.draw(&t, 9, 2);
        assert_eq!(a.dut.rx_delay_ps, p.draw(&t, 9, 3).dut.rx_delay_ps);
        assert_ne!(a.dut.rx_delay_ps, p.draw(&t, 9, 4).dut.rx_delay_ps);
        assert_ne!(a.dut.rx_delay_ps, p.draw(&t, 10, 3).dut.rx_delay_ps);
        assert_eq!(a.validate(), Ok(()));
    }

    #[test]
    fn drawn_units_spread_as_the_population_says() {
        // Over 4000 units the sample SD of K at a state is within a few % of
        // sqrt(unit² + tx² + rx²) = sqrt(400 + 225 + 100) ≈ 26.9 ps; the switch points move
        // together, keeping their 25 dB spacing.
        let t = base();
        let p = t.population.clone().expect("population");
        let ks: Vec<f64> = (0..4000)
            .map(|i| {
                let u = p.draw(&t, 1, i);
                let th = &u.dut.gain_thresholds_dbm;
                assert!((th[0] - th[1] - 25.0).abs() < 1e-9);
                u.dut_k_ps(1).expect("state 1")
            })
            .collect();
        let mean = ks.iter().sum::<f64>() / ks.len() as f64;
        let sd =
            (ks.iter().map(|k| (k - mean).powi(2)).sum::<f64>() / (ks.len() - 1) as f64).sqrt();
        let want = (400.0f64 + 225.0 + 100.0).sqrt();
        assert!(
            (mean - 2650.0).abs() < 3.0 * want / 4000f64.sqrt(),
            "{mean}"
        );
        assert!((sd / want - 1.0).abs() < 0.05, "{sd} vs {want}");
    }

    #[test]
    fn a_station_lengthens_the_true_path_only() {
        let t = base();
        let declared = PathFacts {
            cable_delay_ps: 6100.0,
            fixed_loss_db: 10.0,
            atten_delay_ps_per_db: 0.0,
        };
        let on = on_station(&t, &declared, 40.0);
        assert_eq!(on.true_path(&declared).cable_delay_ps, 6140.0);
        assert_eq!(t.true_path(&declared), declared);
        assert_eq!(on.dut.rx_delay_ps, t.dut.rx_delay_ps);
    }

    #[test]
    fn a_negative_spread_is_refused_by_key() {
        let mut t = base();
        t.population.as_mut().expect("population").rx_delay_sd_ps = -1.0;
        assert_eq!(
            t.validate().map_err(|e| e.key),
            Err("sim.population.rx_delay_sd_ps".to_string())
        );
    }
}
