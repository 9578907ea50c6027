//! The simulated bench's truth, as written in a bench file's `[sim]` table.
//!
//! Keys named in design §4 (`seed`, `tx_power_dbm`, `[sim.dut]` delays, thresholds, `clock_ppm`,
//! `jitter_ps`, `outlier_rate`, `[sim.reference] delay_ps`) are a contract; the rest have
//! defaults chosen to look like a typical 5 GHz conducted bench.

pub use super::population::{SimPopulation, SimStation};
use crate::bench::{PathFacts, PerGain};
use crate::diagnostic::KeyError;
use serde::Deserialize;
use std::collections::BTreeMap;

/// Everything the simulator needs beyond the bench's `[path]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimTruth {
    /// Seed of the simulation's random streams (the command line's `--seed` overrides it).
    #[serde(default = "default_seed")]
    pub seed: u64,
    /// Transmit power of both units, dBm at the antenna port.
    #[serde(default = "default_tx_power")]
    pub tx_power_dbm: f64,
    /// The device under test (FTM initiator).
    pub dut: SimDut,
    /// The reference unit (FTM responder); its clock is the simulation's timebase.
    pub reference: SimReference,
    /// Burst timing.
    #[serde(default)]
    pub ftm: SimFtm,
    /// Attenuator behaviour.
    #[serde(default)]
    pub attenuator: SimAttenuator,
    /// Temperature reported with each exchange; none when absent.
    #[serde(default)]
    pub ambient_c: Option<f64>,
    /// Faults to inject, for rehearsing unattended runs.
    #[serde(default)]
    pub faults: SimFaultsTruth,
    /// A climatic chamber around the DUT, served to a bench role `chamber`.
    #[serde(default)]
    pub chamber: Option<SimChamberTruth>,
    /// The true path where it differs from the one the bench declares.
    #[serde(default)]
    pub path: Option<SimPath>,
    /// How units vary around `[sim.dut]`, for `taucal sim fleet`.
    #[serde(default)]
    pub population: Option<SimPopulation>,
    /// Stations of a simulated line, by name, for `taucal sim fleet`.
    #[serde(default)]
    pub stations: BTreeMap<String, SimStation>,
    /// The DUT in each slot of a slotted bench (`[[sim.slot]]`, keys as `[sim.dut]`), in the
    /// order of the bench's `[[slot]]` tables.
    #[serde(default)]
    pub slot: Vec<SimDut>,
}

/// `[sim.path]`: the path as it truly is.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimPath {
    /// True one-way cable and fixture delay, where it differs from `[path] cable_delay_ps`.
    pub cable_delay_ps: f64,
}

/// Truth of the device under test.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimDut {
    /// Transmit chain group delay.
    pub tx_delay_ps: f64,
    /// Receive chain group delay per gain index (0 = lowest gain, for the strongest signals).
    pub rx_delay_ps: Vec<f64>,
    /// Receive power at which the AGC steps to the next gain index, strictly descending;
    /// one fewer than `rx_delay_ps`.
    #[serde(default)]
    pub gain_thresholds_dbm: Vec<f64>,
    /// Width of the AGC's hysteresis band around each threshold.
    #[serde(default)]
    pub gain_hysteresis_db: f64,
    /// DUT clock frequency offset relative to the reference's clock, ppm.
    #[serde(default)]
    pub clock_ppm: f64,
    /// Timing jitter per timestamp at high SNR, 1 sigma.
    #[serde(default = "default_jitter")]
    pub jitter_ps: f64,
    /// Probability that a time of arrival locks to a late path.
    #[serde(default)]
    pub outlier_rate: f64,
    /// How widely late-path locks spread beyond one sample period, in sample periods: a lock
    /// lands `(1 + late_spread·x)` periods late, `x` drawn from Exp(1). 0 puts every late
    /// detection exactly one period late.
    #[serde(default = "default_late_spread")]
    pub late_spread: f64,
    /// Receiver noise figure.
    #[serde(default = "default_nf")]
    pub noise_figure_db: f64,
    /// Gain of the timing estimator over a single-sample SNR (training symbols, subcarriers).
    #[serde(default = "default_processing_gain")]
    pub processing_gain_db: f64,
    /// SNR at which half of the frames are lost.
    #[serde(default = "default_loss_snr")]
    pub loss_snr_db: f64,
    /// RSSI measurement noise, 1 sigma.
    #[serde(default = "default_rssi_noise")]
    pub rssi_noise_db: f64,
    /// Timing error shared by all exchanges of one burst (re-drawn each burst), 1 sigma.
    #[serde(default = "default_burst_offset")]
    pub burst_offset_ps: f64,
    /// Change of the DUT's K per °C of its temperature away from 25 °C (the delays above hold at
    /// 25 °C), constant or per gain index.
    #[serde(default = "no_drift")]
    pub drift_ps_per_c: PerGain,
    /// The DUT's 48-bit picosecond counter when the simulation starts; drawn from the seed
    /// unless given. Just below 2^48 it wraps early in the run, to rehearse wraps.
    #[serde(default)]
    pub counter_start_ps: Option<u64>,
    /// What the DUT hands over per burst (design §6): raw timestamps unless told otherwise.
    #[serde(default)]
    pub reports: DutReports,
    /// Whether the DUT tells which receive gain state its AGC chose; many devices do not.
    #[serde(default = "yes")]
    pub reports_gain: bool,
    /// The K a range-reporting DUT removes before it reports a distance (its factory value);
    /// required with `reports = "range_burst"`, meaningless otherwise.
    #[serde(default)]
    pub applied_k_ps: Option<f64>,
    /// The unit's serial number, for the results store; the simulation itself ignores it.
    #[serde(default)]
    pub serial: Option<String>,
    /// In `[[sim.slot]]` only: faults injected into this slot's instruments instead of
    /// `[sim.faults]` (one flaky unit on a station).
    #[serde(default)]
    pub faults: Option<SimFaultsTruth>,
}

/// The form in which a DUT reports its ranging (`[sim.dut] reports`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum DutReports {
    /// t1..t4 of every exchange, raw counters: what the fitter has always read.
    #[default]
    Timestamps,
    /// One round-trip time per exchange, clock corrected by the device, no timestamps.
    RttFrames,
    /// One row per burst: the device's average round-trip time over the frames it kept.
    RttBurst,
    /// One row per burst: the device's average distance, its applied K already removed.
    RangeBurst,
}

impl DutReports {
    /// The form's name as bench files write it.
    pub fn name(self) -> &'static str {
        match self {
            DutReports::Timestamps => "timestamps",
            DutReports::RttFrames => "rtt_frames",
            DutReports::RttBurst => "rtt_burst",
            DutReports::RangeBurst => "range_burst",
        }
    }

    /// Whether the device averages a burst into one row.
    pub fn per_burst(self) -> bool {
        matches!(self, DutReports::RttBurst | DutReports::RangeBurst)
    }
}

/// Truth of the reference unit.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimReference {
    /// True K (TX + RX group delay) of the reference, per its gain index or constant.
    pub delay_ps: PerGain,
    /// Receive power thresholds of the reference's AGC (empty: one gain state).
    #[serde(default)]
    pub gain_thresholds_dbm: Vec<f64>,
    /// Width of the reference AGC's hysteresis band around each threshold.
    #[serde(default)]
    pub gain_hysteresis_db: f64,
    /// Timing jitter per timestamp at high SNR, 1 sigma.
    #[serde(default = "default_jitter")]
    pub jitter_ps: f64,
    /// Receiver noise figure.
    #[serde(default = "default_nf")]
    pub noise_figure_db: f64,
    /// Gain of the timing estimator over a single-sample SNR; the same waveform as the DUT's,
    /// so the same default.
    #[serde(default = "default_processing_gain")]
    pub processing_gain_db: f64,
    /// RSSI measurement noise behind the reference's AGC decisions, 1 sigma.
    #[serde(default = "default_rssi_noise")]
    pub rssi_noise_db: f64,
    /// Probability that the reference's time of arrival locks to a late path. Zero by default:
    /// a reference unit is chosen for clean detection, so late paths are the DUT's by default.
    #[serde(default)]
    pub outlier_rate: f64,
    /// How widely the reference's late-path locks spread beyond one sample period, as
    /// `[sim.dut] late_spread`.
    #[serde(default = "default_late_spread")]
    pub late_spread: f64,
    /// The reference's 48-bit picosecond counter when the simulation starts; drawn from the
    /// seed unless given.
    #[serde(default)]
    pub counter_start_ps: Option<u64>,
}

/// Simulated instrument faults (`[sim.faults]`); all off by default. Same seed, same faults.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimFaultsTruth {
    /// Every Nth instrument command finds the connection dropped (0: never).
    #[serde(default)]
    pub drop_connection_every: u64,
    /// Probability that a command's reply times out.
    #[serde(default)]
    pub reply_timeout_rate: f64,
    /// Probability that a command's reply comes garbled.
    #[serde(default)]
    pub garbled_reply_rate: f64,
    /// The DUT restarts after every N exchanges (0: never), losing the burst under way.
    #[serde(default)]
    pub dut_restart_every: u64,
    /// Probability that an exchange fails (recorded with status `fail`).
    #[serde(default)]
    pub failed_exchange_rate: f64,
}

/// The simulated chamber: its air follows the setpoint at a limited ramp rate, and the DUT follows
/// the air with a first-order thermal lag.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimChamberTruth {
    /// Air and DUT temperature when the run starts.
    #[serde(default = "default_start_c")]
    pub start_c: f64,
    /// Fastest change of the air temperature.
    #[serde(default = "default_ramp")]
    pub ramp_c_per_min: f64,
    /// Time constant of the DUT's lag behind the air.
    #[serde(default = "default_tau")]
    pub dut_tau_s: f64,
}

/// Timing of FTM-like bursts.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimFtm {
    /// Interval between successive exchanges of a burst.
    #[serde(default = "default_frame_interval")]
    pub frame_interval_us: f64,
    /// Air time of the measurement frame; the turnaround is this plus SIFS.
    #[serde(default = "default_frame_duration")]
    pub frame_duration_us: f64,
    /// Short interframe space (16 µs for OFDM, IEEE 802.11).
    #[serde(default = "default_sifs")]
    pub sifs_us: f64,
    /// Negotiation time before the first exchange of a burst.
    #[serde(default = "default_burst_setup")]
    pub burst_setup_ms: f64,
}

/// Simulated attenuator.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SimAttenuator {
    /// Time a change of setting takes.
    #[serde(default = "default_switch")]
    pub switch_ms: f64,
}

impl Default for SimFtm {
    fn default() -> Self {
        SimFtm {
            frame_interval_us: default_frame_interval(),
            frame_duration_us: default_frame_duration(),
            sifs_us: default_sifs(),
            burst_setup_ms: default_burst_setup(),
        }
    }
}

impl Default for SimAttenuator {
    fn default() -> Self {
        SimAttenuator {
            switch_ms: default_switch(),
        }
    }
}

fn yes() -> bool {
    true
}
fn no_drift() -> PerGain {
    PerGain::Same(0.0)
}
fn default_start_c() -> f64 {
    25.0
}
fn default_ramp() -> f64 {
    2.0
}
fn default_tau() -> f64 {
    300.0
}
fn default_seed() -> u64 {
    1
}
fn default_tx_power() -> f64 {
    15.0
}
fn default_late_spread() -> f64 {
    1.0
}

fn default_jitter() -> f64 {
    300.0
}
fn default_nf() -> f64 {
    6.0
}
fn default_processing_gain() -> f64 {
    20.0
}
fn default_loss_snr() -> f64 {
    4.0
}
fn default_rssi_noise() -> f64 {
    1.0
}
fn default_burst_offset() -> f64 {
    30.0
}
fn default_frame_interval() -> f64 {
    1000.0
}
fn default_frame_duration() -> f64 {
    44.0
}
fn default_sifs() -> f64 {
    16.0
}
fn default_burst_setup() -> f64 {
    5.0
}
fn default_switch() -> f64 {
    2.0
}

impl SimTruth {
    /// The DUT's true K (TX + RX delay) at gain index `gain`.
    pub fn dut_k_ps(&self, gain: u32) -> Option<f64> {
        self.dut
            .rx_delay_ps
            .get(gain as usize)
            .map(|rx| rx + self.dut.tx_delay_ps)
    }

    /// The reference's true K at its gain index `gain`. A table with one value holds for every
    /// state the reference's AGC can report, so thresholds without per-state delays are valid.
    pub fn ref_k_ps(&self, gain: u32) -> Option<f64> {
        let k = &self.reference.delay_ps;
        if k.states() == 1 {
            k.values().first().copied()
        } else {
            k.at(Some(gain))
        }
    }

    /// The path the simulator uses: the declared one, its cable delay replaced by `[sim.path]`'s
    /// where given.
    pub fn true_path(&self, declared: &PathFacts) -> PathFacts {
        let mut path = declared.clone();
        if let Some(p) = &self.path {
            path.cable_delay_ps = p.cable_delay_ps;
        }
        path
    }

    /// Checks what serde cannot: table lengths, orderings and ranges.
    pub fn validate(&self) -> Result<(), KeyError> {
        if let Some(p) = &self.path {
            finite("sim.path.cable_delay_ps", p.cable_delay_ps)?;
        }
        if let Some(p) = &self.population {
            p.validate()?;
        }
        for (name, st) in &self.stations {
            finite(
                &format!("sim.stations.{name}.path_error_ps"),
                st.path_error_ps,
            )?;
        }
        let d = &self.dut;
        if d.faults.is_some() {
            return Err(KeyError::new(
                "sim.dut.faults",
                "belongs to a slot's unit ([[sim.slot]]), not to [sim.dut]",
                "put the bench's faults under [sim.faults]",
            ));
        }
        if d.rx_delay_ps.is_empty() {
            return Err(KeyError::new(
                "sim.dut.rx_delay_ps",
                "needs at least one delay",
                "give one RX delay in ps per gain index, e.g. [900.0, 1150.0]",
            ));
        }
        if d.gain_thresholds_dbm.len() + 1 != d.rx_delay_ps.len() {
            return Err(KeyError::new(
                "sim.dut.gain_thresholds_dbm",
                format!(
                    "has {} thresholds for {} gain states",
                    d.gain_thresholds_dbm.len(),
                    d.rx_delay_ps.len()
                ),
                "N gain states need N-1 thresholds (one per switch point)",
            ));
        }
        descending("sim.dut.gain_thresholds_dbm", &d.gain_thresholds_dbm)?;
        let r = &self.reference;
        if r.delay_ps.states() > 1 && r.gain_thresholds_dbm.len() + 1 != r.delay_ps.states() {
            return Err(KeyError::new(
                "sim.reference.gain_thresholds_dbm",
                format!(
                    "has {} thresholds for {} reference gain states",
                    r.gain_thresholds_dbm.len(),
                    r.delay_ps.states()
                ),
                "N gain states need N-1 thresholds",
            ));
        }
        descending("sim.reference.gain_thresholds_dbm", &r.gain_thresholds_dbm)?;
        non_negative("sim.dut.jitter_ps", d.jitter_ps)?;
        non_negative("sim.dut.gain_hysteresis_db", d.gain_hysteresis_db)?;
        non_negative("sim.dut.rssi_noise_db", d.rssi_noise_db)?;
        non_negative("sim.dut.burst_offset_ps", d.burst_offset_ps)?;
        let drifts = d.drift_ps_per_c.values();
        if drifts.iter().any(|v| !v.is_finite())
            || (drifts.len() > 1 && drifts.len() != d.rx_delay_ps.len())
        {
            return Err(KeyError::new(
                "sim.dut.drift_ps_per_c",
                "is not one finite drift, nor one per gain state",
                "give one drift in ps/°C, or one per entry of rx_delay_ps",
            ));
        }
        for (key, p) in [
            (
                "sim.faults.reply_timeout_rate",
                self.faults.reply_timeout_rate,
            ),
            (
                "sim.faults.garbled_reply_rate",
                self.faults.garbled_reply_rate,
            ),
            (
                "sim.faults.failed_exchange_rate",
                self.faults.failed_exchange_rate,
            ),
        ] {
            if !(0.0..=0.5).contains(&p) {
                return Err(KeyError::new(
                    key,
                    format!("{p} is not a rate this model supports"),
                    "use 0.0 to 0.5",
                ));
            }
        }
        if let Some(c) = &self.chamber {
            positive("sim.chamber.ramp_c_per_min", c.ramp_c_per_min)?;
            positive("sim.chamber.dut_tau_s", c.dut_tau_s)?;
            if !(-70.0..=180.0).contains(&c.start_c) {
                return Err(KeyError::new(
                    "sim.chamber.start_c",
                    format!("{} °C is outside -70..180 °C", c.start_c),
                    "give a temperature a climatic chamber can hold",
                ));
            }
        }
        non_negative("sim.reference.jitter_ps", r.jitter_ps)?;
        non_negative("sim.dut.late_spread", d.late_spread)?;
        non_negative("sim.reference.late_spread", r.late_spread)?;
        non_negative("sim.reference.rssi_noise_db", r.rssi_noise_db)?;
        non_negative("sim.reference.gain_hysteresis_db", r.gain_hysteresis_db)?;
        outlier_rate("sim.dut.outlier_rate", d.outlier_rate)?;
        outlier_rate("sim.reference.outlier_rate", r.outlier_rate)?;
        for (key, start) in [
            ("sim.dut.counter_start_ps", d.counter_start_ps),
            ("sim.reference.counter_start_ps", r.counter_start_ps),
        ] {
            if start.is_some_and(|v| v >= 1 << 48) {
                return Err(KeyError::new(
                    key,
                    "is not a 48-bit counter value",
                    "give 0 to 281474976710655 (2^48 − 1), or leave it out to draw it from the seed",
                ));
            }
        }
        // The model does arithmetic with these; a NaN would pass every ordering check above and
        // then silently poison timestamps.
        finite("sim.tx_power_dbm", self.tx_power_dbm)?;
        finite("sim.dut.tx_delay_ps", d.tx_delay_ps)?;
        finite_all("sim.dut.rx_delay_ps", &d.rx_delay_ps)?;
        finite_all("sim.dut.gain_thresholds_dbm", &d.gain_thresholds_dbm)?;
        finite("sim.dut.noise_figure_db", d.noise_figure_db)?;
        finite("sim.dut.processing_gain_db", d.processing_gain_db)?;
        finite("sim.dut.loss_snr_db", d.loss_snr_db)?;
        finite_all("sim.reference.delay_ps", r.delay_ps.values())?;
        finite_all("sim.reference.gain_thresholds_dbm", &r.gain_thresholds_dbm)?;
        finite("sim.reference.noise_figure_db", r.noise_figure_db)?;
        finite("sim.reference.processing_gain_db", r.processing_gain_db)?;
        if !(-200.0..=200.0).contains(&d.clock_ppm) {
            return Err(KeyError::new(
                "sim.dut.clock_ppm",
                format!("{} ppm is outside ±200 ppm", d.clock_ppm),
                "IEEE 802.11 allows ±20 ppm per station (±25 ppm at 2.4 GHz)",
            ));
        }
        match (d.reports, d.applied_k_ps) {
            (DutReports::RangeBurst, None) => return Err(KeyError::new(
                "sim.dut.applied_k_ps",
                "is missing: a DUT with reports = \"range_burst\" removes a K of its own",
                "give the K in ps the device subtracts before it reports a distance, e.g. 2600.0",
            )),
            (DutReports::RangeBurst, Some(k)) => finite("sim.dut.applied_k_ps", k)?,
            (other, Some(_)) => {
                return Err(KeyError::new(
                    "sim.dut.applied_k_ps",
                    format!(
                        "applies only to reports = \"range_burst\", not \"{}\"",
                        other.name()
                    ),
                    "remove it, or set reports = \"range_burst\"",
                ))
            }
            (_, None) => {}
        }
        let f = &self.ftm;
        positive("sim.ftm.frame_duration_us", f.frame_duration_us)?;
        non_negative("sim.ftm.sifs_us", f.sifs_us)?;
        non_negative("sim.ftm.burst_setup_ms", f.burst_setup_ms)?;
        non_negative("sim.attenuator.switch_ms", self.attenuator.switch_ms)?;
        if f.frame_interval_us < f.frame_duration_us + f.sifs_us {
            return Err(KeyError::new(
                "sim.ftm.frame_interval_us",
                format!(
                    "{} µs is shorter than one exchange ({} µs frame + {} µs SIFS)",
                    f.frame_interval_us, f.frame_duration_us, f.sifs_us
                ),
                "space exchanges by at least frame_duration_us + sifs_us",
            ));
        }
        Ok(())
    }
}

fn descending(key: &str, v: &[f64]) -> Result<(), KeyError> {
    if v.windows(2).any(|w| w[1] >= w[0]) {
        return Err(KeyError::new(
            key,
            "thresholds are not strictly descending",
            "list switch points from the strongest signal down, e.g. [-30.0, -55.0]",
        ));
    }
    Ok(())
}

fn outlier_rate(key: &str, v: f64) -> Result<(), KeyError> {
    if (0.0..=0.5).contains(&v) {
        Ok(())
    } else {
        Err(KeyError::new(
            key,
            format!("{v} is not a probability this model supports"),
            "use a fraction between 0.0 and 0.5",
        ))
    }
}

fn finite(key: &str, v: f64) -> Result<(), KeyError> {
    if v.is_finite() {
        Ok(())
    } else {
        Err(KeyError::new(
            key,
            format!("{v} is not a finite number"),
            "give a plain number",
        ))
    }
}

fn finite_all(key: &str, v: &[f64]) -> Result<(), KeyError> {
    v.iter()
        .enumerate()
        .try_for_each(|(i, x)| finite(&format!("{key}.{i}"), *x))
}

pub(crate) fn non_negative(key: &str, v: f64) -> Result<(), KeyError> {
    if v.is_finite() && v >= 0.0 {
        Ok(())
    } else {
        Err(KeyError::new(
            key,
            format!("{v} is negative or not finite"),
            "use a value ≥ 0",
        ))
    }
}

fn positive(key: &str, v: f64) -> Result<(), KeyError> {
    if v.is_finite() && v > 0.0 {
        Ok(())
    } else {
        Err(KeyError::new(
            key,
            format!("{v} is not positive"),
            "use a value > 0",
        ))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Design §4 contract keys, with the reference given per-state delays.
    const BENCH: &str = r#"
        seed = 1
        tx_power_dbm = 15.0
        [dut]
        tx_delay_ps = 1500.0
        rx_delay_ps = [900.0, 1150.0, 1400.0]
        gain_thresholds_dbm = [-30.0, -55.0]
        clock_ppm = 8.0
        jitter_ps = 300.0
        outlier_rate = 0.01
        [reference]
        delay_ps = 2800.0
        gain_thresholds_dbm = [-40.0]
    "#;

    fn truth() -> SimTruth {
        toml::from_str(BENCH).expect("test bench parses")
    }

    #[test]
    fn contract_example_is_valid() {
        // Values from design §4's example table.
        let t = truth();
        assert_eq!(t.validate(), Ok(()));
        assert_eq!(t.dut_k_ps(2), Some(2900.0));
        assert_eq!(t.dut_k_ps(3), None);
    }

    #[test]
    fn one_reference_delay_holds_for_every_reference_state() {
        // Design §2: the reference's table is keyed by its gain state where it reports one; a
        // single value is the unkeyed case.
        let t = truth();
        assert_eq!(t.ref_k_ps(0), Some(2800.0));
        assert_eq!(t.ref_k_ps(1), Some(2800.0));
    }

    #[test]
    fn per_state_reference_delays_are_looked_up() {
        let mut t = truth();
        t.reference.delay_ps = PerGain::Each(vec![2800.0, 2850.0]);
        assert_eq!(t.validate(), Ok(()));
        assert_eq!(t.ref_k_ps(1), Some(2850.0));
        assert_eq!(t.ref_k_ps(2), None);
    }

    #[test]
    fn nan_threshold_is_rejected_by_name() {
        // NaN compares false, so the ordering check alone would let it through.
        let mut t = truth();
        t.dut.gain_thresholds_dbm[1] = f64::NAN;
        let err = t.validate().expect_err("NaN threshold must be rejected");
        assert_eq!(err.key, "sim.dut.gain_thresholds_dbm.1");
    }

    #[test]
    fn a_dut_reports_timestamps_with_its_gain_unless_told_otherwise() {
        // Design §6: reports defaults to timestamps, reports_gain to true, serial to absent.
        let t = truth();
        assert_eq!(t.dut.reports, DutReports::Timestamps);
        assert!(t.dut.reports_gain);
        assert_eq!((t.dut.applied_k_ps, t.dut.serial.as_deref()), (None, None));
        let told: SimTruth = toml::from_str(&BENCH.replace(
            "outlier_rate = 0.01",
            "outlier_rate = 0.01\nreports = \"rtt_frames\"\nreports_gain = false\nserial = \"SN 7\"",
        ))
        .expect("keys parse");
        assert_eq!(told.validate(), Ok(()));
        assert_eq!(told.dut.reports, DutReports::RttFrames);
        assert!(!told.dut.reports_gain);
        assert_eq!(told.dut.serial.as_deref(), Some("SN 7"));
        let unknown = toml::from_str::<SimTruth>(&BENCH.replace(
            "outlier_rate = 0.01",
            "outlier_rate = 0.01\nreports = \"range\"",
        ))
        .expect_err("not a form");
        assert!(unknown.to_string().contains("range_burst"), "{unknown}");
    }

    #[test]
    fn the_applied_k_belongs_to_range_reports_alone_and_must_be_finite() {
        let mut t = truth();
        t.dut.reports = DutReports::RangeBurst;
        let err = t.validate().expect_err("range without its applied K");
        assert_eq!(err.key, "sim.dut.applied_k_ps");
        assert!(err.message.contains("is missing"), "{}", err.message);
        t.dut.applied_k_ps = Some(f64::INFINITY);
        assert_eq!(
            t.validate().map_err(|e| e.key),
            Err("sim.dut.applied_k_ps".to_string())
        );
        t.dut.applied_k_ps = Some(2600.0);
        assert_eq!(t.validate(), Ok(()));
        t.dut.reports = DutReports::RttBurst;
        let err = t.validate().expect_err("applied K without a range");
        assert_eq!(err.key, "sim.dut.applied_k_ps");
        assert!(err.message.contains("not \"rtt_burst\""), "{}", err.message);
    }

    #[test]
    fn reference_outlier_rate_is_a_bounded_probability() {
        let mut t = truth();
        t.reference.outlier_rate = 0.7;
        let err = t.validate().expect_err("rate above 0.5 must be rejected");
        assert_eq!(err.key, "sim.reference.outlier_rate");
    }

    #[test]
    fn late_spread_defaults_to_one_period_and_may_not_be_negative() {
        let mut t = truth();
        assert_eq!((t.dut.late_spread, t.reference.late_spread), (1.0, 1.0));
        t.dut.late_spread = -0.5;
        let err = t
            .validate()
            .expect_err("a negative spread must be rejected");
        assert_eq!(err.key, "sim.dut.late_spread");
        t.dut.late_spread = 0.0;
        t.reference.late_spread = f64::NAN;
        let err = t.validate().expect_err("NaN must be rejected");
        assert_eq!(err.key, "sim.reference.late_spread");
    }
}
