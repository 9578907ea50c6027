//! How well a receiver times an arriving frame: link budget, timing noise, late-path locks and
//! frame loss.
//!
//! The error of one time of arrival is Gaussian with
//! `sigma = sqrt(jitter² + crb²)`, where `crb` is the Cramér–Rao bound for delay estimation at the
//! receiver's effective SNR (tests/data/SOURCES.md §9): the floor that a real estimator approaches at high SNR
//! is the fixed `jitter`, and below it the bound grows as SNR falls. Now and then detection locks
//! to a late path and lands at least one sample period late. Near sensitivity frames are lost.
//! This module holds the formulas and draws; it keeps no state, so the caller owns the random
//! streams and their order.

use rand::{Rng, RngExt};
use rand_distr::{Distribution, Exp1, StandardNormal};

/// Thermal noise density at room temperature, dBm per Hz (kT at 290 K; common practice).
pub const THERMAL_NOISE_DBM_PER_HZ: f64 = -174.0;

/// Width of the frame-loss transition: the loss probability goes from 27 % to 73 % over ±1 of
/// these around the half-loss SNR (a logistic curve; common practice for a packet-error
/// waterfall).
pub const LOSS_SLOPE_DB: f64 = 1.0;

/// One receiver's timing properties.
#[derive(Debug, Clone, PartialEq)]
pub struct Receiver {
    /// Receiver noise figure.
    pub noise_figure_db: f64,
    /// Gain of the timing estimator over the per-sample SNR.
    pub processing_gain_db: f64,
    /// Timing noise floor at high SNR, 1 sigma.
    pub jitter_ps: f64,
    /// Probability that a time of arrival locks to a late path.
    pub outlier_rate: f64,
    /// Spread of a late lock beyond one sample period, in sample periods (see
    /// [`late_path_delay_ps`]).
    pub late_spread: f64,
}

/// One drawn time-of-arrival error.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ToaError {
    /// Total error to add to the true arrival time (positive = detected late).
    pub error_ps: f64,
    /// Whether the detection locked to a late path.
    pub late_path: bool,
}

impl Receiver {
    /// SNR of a frame received at `rx_dbm` in a `bw_hz` channel, before processing gain.
    pub fn snr_db(&self, rx_dbm: f64, bw_hz: f64) -> f64 {
        rx_dbm - noise_floor_dbm(bw_hz, self.noise_figure_db)
    }

    /// 1-sigma timing noise of one time of arrival at `rx_dbm` in a `bw_hz` channel.
    pub fn sigma_ps(&self, rx_dbm: f64, bw_hz: f64) -> f64 {
        let snr_eff_db = self.snr_db(rx_dbm, bw_hz) + self.processing_gain_db;
        self.jitter_ps.hypot(crb_sigma_ps(snr_eff_db, bw_hz))
    }

    /// Draws the error of one time of arrival. Always consumes one value from `noise_rng` and two
    /// from `late_rng`, whatever the outcome, so one draw's result never shifts another's.
    pub fn draw_toa_error<N: Rng + ?Sized, L: Rng + ?Sized>(
        &self,
        rx_dbm: f64,
        bw_hz: f64,
        noise_rng: &mut N,
        late_rng: &mut L,
    ) -> ToaError {
        let z: f64 = StandardNormal.sample(noise_rng);
        let u: f64 = late_rng.random();
        let excess: f64 = Exp1.sample(late_rng);
        let late_path = u < self.outlier_rate;
        let late_ps = if late_path {
            late_path_delay_ps(excess * self.late_spread, bw_hz)
        } else {
            0.0
        };
        ToaError {
            error_ps: z * self.sigma_ps(rx_dbm, bw_hz) + late_ps,
            late_path,
        }
    }
}

/// Receiver noise floor: thermal noise over `bw_hz` plus the noise figure.
pub fn noise_floor_dbm(bw_hz: f64, noise_figure_db: f64) -> f64 {
    THERMAL_NOISE_DBM_PER_HZ + 10.0 * bw_hz.log10() + noise_figure_db
}

/// RMS bandwidth of a flat spectrum `bw_hz` wide: `B / sqrt(12)` (tests/data/SOURCES.md §9).
pub fn rms_bandwidth_hz(bw_hz: f64) -> f64 {
    bw_hz / 12f64.sqrt()
}

/// Cramér–Rao bound on the 1-sigma delay error at effective SNR `snr_eff_db`:
/// `1 / (2π·β·sqrt(2·SNR))` with β the flat-spectrum RMS bandwidth (tests/data/SOURCES.md §9).
pub fn crb_sigma_ps(snr_eff_db: f64, bw_hz: f64) -> f64 {
    let snr_linear = 10f64.powf(snr_eff_db / 10.0);
    let sigma_s =
        1.0 / (2.0 * std::f64::consts::PI * rms_bandwidth_hz(bw_hz) * (2.0 * snr_linear).sqrt());
    sigma_s * 1e12
}

/// Extra delay of a late-path lock: `(1 + x)` sample periods of a `bw_hz` channel, `x` an Exp(1)
/// draw scaled by the receiver's late spread. Never less than one sample period: on wide
/// channels with coarse jitter that is only a few jitter sigmas, close enough to the core to
/// survive a symmetric rejection window.
pub fn late_path_delay_ps(exp1_draw: f64, bw_hz: f64) -> f64 {
    (1.0 + exp1_draw.max(0.0)) * sample_period_ps(bw_hz)
}

/// One sample period of a channel sampled at its bandwidth: 12.5 ns at 80 MHz.
pub fn sample_period_ps(bw_hz: f64) -> f64 {
    1e12 / bw_hz
}

/// Probability that a frame is lost at `snr_db`: one half at `loss_snr_db`, a logistic
/// waterfall of width [`LOSS_SLOPE_DB`] around it.
pub fn frame_loss_probability(snr_db: f64, loss_snr_db: f64) -> f64 {
    1.0 / (1.0 + ((snr_db - loss_snr_db) / LOSS_SLOPE_DB).exp())
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;
    use rand_chacha::ChaCha8Rng;

    const MHZ: f64 = 1e6;

    fn receiver() -> Receiver {
        Receiver {
            noise_figure_db: 6.0,
            processing_gain_db: 20.0,
            jitter_ps: 0.0,
            outlier_rate: 0.0,
            late_spread: 1.0,
        }
    }

    #[test]
    fn noise_floor_of_a_20_mhz_channel() {
        // Common practice: −174 dBm/Hz + 10·log10(20e6) = −100.99 dBm, plus the noise figure.
        assert!((noise_floor_dbm(20.0 * MHZ, 0.0) - -100.9897).abs() < 1e-3);
        assert!((noise_floor_dbm(20.0 * MHZ, 6.0) - -94.9897).abs() < 1e-3);
        // Doubling the bandwidth doubles the noise power: +3.01 dB.
        let step = noise_floor_dbm(40.0 * MHZ, 6.0) - noise_floor_dbm(20.0 * MHZ, 6.0);
        assert!((step - 3.0103).abs() < 1e-3);
    }

    #[test]
    fn crb_matches_the_closed_form() {
        // tests/data/SOURCES.md §9: var ≥ 1/(8π²β²SNR), β = B/sqrt(12). At 80 MHz and 30 dB:
        // β = 23.094 MHz, sigma = 1/(2π·23.094e6·sqrt(2000)) = 154.1 ps (computed).
        let sigma = crb_sigma_ps(30.0, 80.0 * MHZ);
        let variance_s2 =
            1.0 / (8.0 * std::f64::consts::PI.powi(2) * (80e6f64 / 12f64.sqrt()).powi(2) * 1000.0);
        assert!((sigma - variance_s2.sqrt() * 1e12).abs() < 1e-9);
        assert!((sigma - 154.1).abs() < 0.1, "{sigma}");
    }

    #[test]
    fn quadrupling_snr_halves_the_crb() {
        // tests/data/SOURCES.md §9: sigma ∝ 1/sqrt(SNR); 4× SNR = +6.0206 dB.
        let four_times_db = 10.0 * 4f64.log10();
        for snr_db in [0.0, 12.0, 30.0] {
            let ratio =
                crb_sigma_ps(snr_db, 40.0 * MHZ) / crb_sigma_ps(snr_db + four_times_db, 40.0 * MHZ);
            assert!((ratio - 2.0).abs() < 1e-12, "{ratio}");
        }
    }

    #[test]
    fn doubling_bandwidth_halves_the_crb() {
        // tests/data/SOURCES.md §9: sigma ∝ 1/β, β ∝ B, at the same SNR.
        let ratio = crb_sigma_ps(20.0, 20.0 * MHZ) / crb_sigma_ps(20.0, 40.0 * MHZ);
        assert!((ratio - 2.0).abs() < 1e-12);
    }

    #[test]
    fn sigma_adds_jitter_and_crb_in_quadrature() {
        let mut rx = receiver();
        rx.jitter_ps = 300.0;
        let bw_hz = 80.0 * MHZ;
        let crb = crb_sigma_ps(rx.snr_db(-60.0, bw_hz) + rx.processing_gain_db, bw_hz);
        let sigma = rx.sigma_ps(-60.0, bw_hz);
        assert!((sigma * sigma - (300.0 * 300.0 + crb * crb)).abs() < 1e-6);
        // Far above sensitivity the jitter floor dominates; near it the bound does.
        assert!(rx.sigma_ps(-20.0, bw_hz) < 301.0);
        assert!(rx.sigma_ps(-95.0, bw_hz) > 600.0);
    }

    #[test]
    fn late_path_is_at_least_one_sample_period() {
        // 1/80 MHz = 12.5 ns (computed).
        assert!((sample_period_ps(80.0 * MHZ) - 12_500.0).abs() < 1e-9);
        assert!((late_path_delay_ps(0.0, 80.0 * MHZ) - 12_500.0).abs() < 1e-9);
        assert!((late_path_delay_ps(1.0, 20.0 * MHZ) - 100_000.0).abs() < 1e-6);
    }

    #[test]
    fn frame_loss_waterfall() {
        // Logistic with 1 dB slope: 1/2 at the half-loss SNR, 1/(1+e) one dB above.
        assert!((frame_loss_probability(4.0, 4.0) - 0.5).abs() < 1e-12);
        let one_above = 1.0 / (1.0 + std::f64::consts::E);
        assert!((frame_loss_probability(5.0, 4.0) - one_above).abs() < 1e-12);
        assert!(frame_loss_probability(30.0, 4.0) < 1e-11);
        assert!(frame_loss_probability(-20.0, 4.0) > 1.0 - 1e-10);
        let curve: Vec<f64> = (-10..20)
            .map(|s| frame_loss_probability(f64::from(s), 4.0))
            .collect();
        assert!(
            curve.windows(2).all(|w| w[1] < w[0]),
            "loss must fall as SNR rises"
        );
    }

    #[test]
    fn draws_consume_a_fixed_amount_of_randomness() {
        // Whether or not a draw is late, the streams advance alike: two receivers differing only
        // in outlier rate see the same Gaussian part.
        let mut clean = receiver();
        clean.jitter_ps = 100.0;
        let mut dirty = clean.clone();
        dirty.outlier_rate = 0.5;
        let (mut n1, mut l1) = (ChaCha8Rng::seed_from_u64(3), ChaCha8Rng::seed_from_u64(4));
        let (mut n2, mut l2) = (ChaCha8Rng::seed_from_u64(3), ChaCha8Rng::seed_from_u64(4));
        let mut late = 0;
        for _ in 0..200 {
            let a = clean.draw_toa_error(-40.0, 80.0 * MHZ, &mut n1, &mut l1);
            let b = dirty.draw_toa_error(-40.0, 80.0 * MHZ, &mut n2, &mut l2);
            assert!(!a.late_path);
            if b.late_path {
                late += 1;
                assert!(b.error_ps - a.error_ps >= 12_500.0 - 1e-6);
            } else {
                assert_eq!(a.error_ps, b.error_ps);
            }
        }
        assert!(late > 0);
    }
}
