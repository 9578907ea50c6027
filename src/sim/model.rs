//! The simulated conducted bench: reference unit (FTM responder) — cables — attenuator — cables —
//! DUT (FTM initiator), and the ranging bursts they exchange.
//!
//! Physics per exchange (design §2), in bench time, which is the reference's clock:
//!
//! - the reference departs at `T1` (its digital timestamp `t1`, exact);
//! - the DUT detects the frame at `T2 = T1 + tof + Krx_dut(g) + burst offset + TOA error`, `g` the
//!   gain state its AGC picked from the measured level, and stamps `t2` on its own counter;
//! - the DUT replies a fixed turnaround (frame duration + SIFS) later *counted on its own clock*
//!   from its detection, so `t3 = t2 + turnaround` exactly and any detection error moves the
//!   reply too;
//! - the reference detects the reply at `T4 = T3 + Ktx_dut + tof + K_ref(g_ref) + TOA error`.
//!
//! Only the sum of a unit's TX and RX delays is observable, so the reference's whole K sits on its
//! receive side (where its gain state acts). The round trip therefore holds
//! `2·tof + K_ref(g_ref) + K_dut(g)` plus noise, and the uncorrected RTT carries about
//! `−turnaround·e` from the DUT's frequency offset `e`.
//!
//! The model is pure and synchronous: no wall time, no I/O, randomness only from streams derived
//! from the seed, one stream per concern so changing one kind of noise leaves the others alone.

use super::agc::Agc;
use super::counter::{wrapping_add_ps, Counter48, COUNTER_MODULUS};
use super::device_report::{rate_reading_sigma_ppm, BurstConditions, DeviceFirmware, DeviceReport};
use super::timing::{frame_loss_probability, Receiver};
use super::truth::{DutReports, SimTruth};
use crate::bench::{PathFacts, PerGain};
use crate::data::{DeviceExchange, STATUS_OK};
use crate::diagnostic::KeyError;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};

/// Status of an exchange whose frame or reply was not received: only `t1` is reported.
pub const STATUS_LOST: &str = "lost";

/// Temperature at which the truth's delays hold; drift is counted from here.
pub const DRIFT_REFERENCE_C: f64 = 25.0;

/// Status of every exchange of a burst the DUT refused (a zero-width channel): nothing reported.
pub const STATUS_REJECTED: &str = "rejected";

/// What the runner asks the DUT to do: one burst of ranging exchanges on one channel.
#[derive(Debug, Clone, PartialEq)]
pub struct BurstRequest {
    /// Number of exchanges in the burst.
    pub frames: u32,
    /// Channel center frequency in MHz (the model's delays do not depend on it).
    pub center_mhz: u32,
    /// Channel bandwidth in MHz: sets the noise floor, the timing bound and the sample period.
    pub bw_mhz: u32,
}

/// What a burst produced.
#[derive(Debug, Clone, PartialEq)]
pub struct BurstOutcome {
    /// One record per requested exchange, in order.
    pub exchanges: Vec<DeviceExchange>,
    /// Bench time the burst took: setup plus `frames` exchange intervals.
    pub duration_ps: u64,
}

/// The simulated bench's state: attenuator setting, both AGCs, both counters, the random streams.
#[derive(Debug, Clone)]
pub struct SimBench {
    path: PathFacts,
    tx_power_dbm: f64,
    ambient_c: Option<f64>,
    dut_temp_c: Option<f64>,
    dut_drift_ps_per_c: PerGain,
    atten_db: f64,
    dut: Unit,
    reference: Unit,
    /// TX group delay of the DUT; the reference's K is all on its receive side.
    dut_tx_delay_ps: f64,
    loss_snr_db: f64,
    burst_offset_ps: f64,
    turnaround_ps: u64,
    /// Air time of the measurement frame.
    frame_ps: u64,
    setup_ps: u64,
    interval_ps: u64,
    streams: Streams,
    /// What the DUT makes of the exchanges before it reports them.
    firmware: DeviceFirmware,
}

/// One unit's receiver: AGC, the K (or RX delay) per gain state, timing and counter.
#[derive(Debug, Clone)]
struct Unit {
    agc: Agc,
    /// Delay added at reception per gain index; one entry per AGC state (checked in `new`).
    rx_delay_ps: Vec<f64>,
    rssi_noise_db: f64,
    receiver: Receiver,
    clock: Counter48,
}

impl Unit {
    /// Delay at gain index `gain`. `SimBench::new` made the table one entry per AGC state, so the
    /// index is always in range; the zero fallback only keeps this total.
    fn rx_delay_ps(&self, gain: u32) -> f64 {
        self.rx_delay_ps
            .get(gain as usize)
            .copied()
            .unwrap_or_default()
    }
}

/// Independent random streams, one per concern.
#[derive(Debug, Clone)]
struct Streams {
    /// RSSI measurement noise behind both AGCs.
    level: ChaCha8Rng,
    /// Gaussian time-of-arrival noise.
    timing: ChaCha8Rng,
    /// Late-path locks.
    late: ChaCha8Rng,
    /// Frame loss.
    loss: ChaCha8Rng,
    /// Per-burst common offsets.
    burst: ChaCha8Rng,
}

/// Stream numbers under one seed (ChaCha's 64-bit stream parameter).
const STREAM_COUNTERS: u64 = 0;
const STREAM_LEVEL: u64 = 1;
const STREAM_TIMING: u64 = 2;
const STREAM_LATE: u64 = 3;
const STREAM_LOSS: u64 = 4;
const STREAM_BURST: u64 = 5;
/// The DUT firmware's own estimates (stream 6 is the fault injector's).
const STREAM_DEVICE: u64 = 7;

fn stream(seed: u64, id: u64) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(id);
    rng
}

fn us_to_ps(us: f64) -> u64 {
    // Validated non-negative and finite; `as` saturates rather than wrapping if not.
    (us * 1e6).round() as u64
}

impl SimBench {
    /// A bench built from `truth` and `path`, its randomness seeded by `seed` (which replaces
    /// `truth.seed`: the caller decides, e.g. from `--seed`). The attenuator starts at 0 dB; both
    /// counters start at random 48-bit values drawn here, so runs cross counter wraps.
    pub fn new(truth: &SimTruth, path: &PathFacts, seed: u64) -> Result<SimBench, KeyError> {
        truth.validate()?;
        check_path(path)?;
        let d = &truth.dut;
        let r = &truth.reference;
        let mut counters = stream(seed, STREAM_COUNTERS);
        // Both are drawn even when given, so a given start leaves every other draw as it was.
        let ref_start_ps = counters.random_range(0..COUNTER_MODULUS);
        let dut_start_ps = counters.random_range(0..COUNTER_MODULUS);
        let ref_start_ps = r.counter_start_ps.unwrap_or(ref_start_ps);
        let dut_start_ps = d.counter_start_ps.unwrap_or(dut_start_ps);

        let dut_agc = Agc::new(&d.gain_thresholds_dbm, d.gain_hysteresis_db);
        let ref_agc = Agc::new(&r.gain_thresholds_dbm, r.gain_hysteresis_db);
        let ref_k_ps = (0..ref_agc.states())
            .map(|g| truth.ref_k_ps(g))
            .collect::<Option<Vec<f64>>>()
            .ok_or_else(|| {
                KeyError::new(
                    "sim.reference.delay_ps",
                    "has no delay for some reference gain state",
                    "give one delay, or one per reference gain state",
                )
            })?;
        let dut = Unit {
            agc: dut_agc,
            rx_delay_ps: d.rx_delay_ps.clone(),
            rssi_noise_db: d.rssi_noise_db,
            receiver: Receiver {
                noise_figure_db: d.noise_figure_db,
                processing_gain_db: d.processing_gain_db,
                jitter_ps: d.jitter_ps,
                outlier_rate: d.outlier_rate,
                late_spread: d.late_spread,
            },
            clock: Counter48::new(dut_start_ps, d.clock_ppm),
        };
        let reference = Unit {
            agc: ref_agc,
            rx_delay_ps: ref_k_ps,
            rssi_noise_db: r.rssi_noise_db,
            receiver: Receiver {
                noise_figure_db: r.noise_figure_db,
                processing_gain_db: r.processing_gain_db,
                jitter_ps: r.jitter_ps,
                outlier_rate: r.outlier_rate,
                late_spread: r.late_spread,
            },
            clock: Counter48::new(ref_start_ps, 0.0),
        };
        let f = &truth.ftm;
        Ok(SimBench {
            path: path.clone(),
            tx_power_dbm: truth.tx_power_dbm,
            ambient_c: truth.ambient_c,
            dut_temp_c: truth.ambient_c,
            dut_drift_ps_per_c: d.drift_ps_per_c.clone(),
            atten_db: 0.0,
            dut,
            reference,
            dut_tx_delay_ps: d.tx_delay_ps,
            loss_snr_db: d.loss_snr_db,
            burst_offset_ps: d.burst_offset_ps,
            turnaround_ps: us_to_ps(f.frame_duration_us + f.sifs_us),
            frame_ps: us_to_ps(f.frame_duration_us),
            setup_ps: us_to_ps(f.burst_setup_ms * 1e3),
            interval_ps: us_to_ps(f.frame_interval_us),
            streams: Streams {
                level: stream(seed, STREAM_LEVEL),
                timing: stream(seed, STREAM_TIMING),
                late: stream(seed, STREAM_LATE),
                loss: stream(seed, STREAM_LOSS),
                burst: stream(seed, STREAM_BURST),
            },
            firmware: DeviceFirmware::new(
                d.reports,
                d.reports_gain,
                d.applied_k_ps,
                stream(seed, STREAM_DEVICE),
            ),
        })
    }

    /// Sets the attenuator (both directions see it: the path is reciprocal).
    pub fn set_atten_db(&mut self, db: f64) {
        self.atten_db = db;
    }

    /// The attenuator's setting.
    pub fn atten_db(&self) -> f64 {
        self.atten_db
    }

    /// Nominal receive level at the DUT: reference TX power − fixed loss − attenuation.
    pub fn rx_power_dut_dbm(&self) -> f64 {
        self.tx_power_dbm - self.path.fixed_loss_db - self.atten_db
    }

    /// Nominal receive level at the reference. Both units transmit `tx_power_dbm` over the same
    /// reciprocal path, so it equals the DUT's; kept apart because the two receivers differ.
    pub fn rx_power_ref_dbm(&self) -> f64 {
        self.tx_power_dbm - self.path.fixed_loss_db - self.atten_db
    }

    /// Ambient temperature at the DUT, where the bench has one (not part of an exchange record;
    /// the runner adds it to each row).
    pub fn ambient_c(&self) -> Option<f64> {
        self.ambient_c
    }

    /// Sets the DUT's temperature (from a simulated chamber); its K drifts with it.
    pub fn set_dut_temp_c(&mut self, temp_c: f64) {
        self.dut_temp_c = Some(temp_c);
    }

    /// The DUT's temperature, when the bench has one.
    pub fn dut_temp_c(&self) -> Option<f64> {
        self.dut_temp_c
    }

    /// The DUT's RX delay at gain `gain` and its present temperature.
    fn dut_rx_delay_now_ps(&self, gain: u32) -> f64 {
        let drift = self.dut_drift_ps_per_c.at(Some(gain)).unwrap_or(0.0);
        let warm_c = self.dut_temp_c.map_or(0.0, |t| t - DRIFT_REFERENCE_C);
        self.dut.rx_delay_ps(gain) + drift * warm_c
    }

    /// Runs one burst that starts at bench time `start_ps` (integer picoseconds since the run
    /// began). Exchange `k` departs the reference at `start_ps + setup + k·interval`.
    pub fn run_burst(&mut self, start_ps: u64, req: &BurstRequest) -> BurstOutcome {
        self.run_burst_delayed(start_ps, req, &[])
    }

    /// When the exchanges of a burst of `frames` that starts at `start_ps` depart, unhindered.
    pub fn departures_ps(&self, start_ps: u64, frames: u32) -> Vec<u64> {
        let first_ps = start_ps.saturating_add(self.setup_ps);
        (0..u64::from(frames))
            .map(|k| first_ps.saturating_add(k.saturating_mul(self.interval_ps)))
            .collect()
    }

    /// How long one exchange holds the air: the measurement frame, SIFS and the
    /// acknowledgement (taken as long as the frame).
    pub fn exchange_air_ps(&self) -> u64 {
        self.turnaround_ps.saturating_add(self.frame_ps)
    }

    /// The spacing of a burst's exchanges.
    pub fn interval_ps(&self) -> u64 {
        self.interval_ps
    }

    /// As [`SimBench::run_burst`], exchange `k` departing `delays_ps[k]` late (a shared
    /// reference was busy); missing delays are zero. The burst lasts as much longer as its last
    /// exchange was delayed.
    pub fn run_burst_delayed(
        &mut self,
        start_ps: u64,
        req: &BurstRequest,
        delays_ps: &[u64],
    ) -> BurstOutcome {
        let late_ps = delays_ps.last().copied().unwrap_or(0);
        let duration_ps = self
            .setup_ps
            .saturating_add(u64::from(req.frames).saturating_mul(self.interval_ps))
            .saturating_add(late_ps);
        if req.bw_mhz == 0 {
            let refused = DeviceExchange::empty(STATUS_REJECTED);
            return BurstOutcome {
                exchanges: vec![refused; req.frames as usize],
                duration_ps,
            };
        }
        let bw_hz = f64::from(req.bw_mhz) * 1e6;
        let dut_dbm = self.rx_power_dut_dbm();
        let ref_dbm = self.rx_power_ref_dbm();
        // An exchange needs both frames, so the weaker link sets the loss.
        let link_snr_db = self
            .dut
            .receiver
            .snr_db(dut_dbm, bw_hz)
            .min(self.reference.receiver.snr_db(ref_dbm, bw_hz));
        let z: f64 = StandardNormal.sample(&mut self.streams.burst);
        let conditions = Conditions {
            bw_hz,
            dut_dbm,
            ref_dbm,
            tof_ps: self.path.one_way_delay_ps(self.atten_db),
            loss_probability: frame_loss_probability(link_snr_db, self.loss_snr_db),
            burst_offset_ps: z * self.burst_offset_ps,
            turnaround_bench_ps: self.dut.clock.ticks_to_bench_ps(self.turnaround_ps as f64),
        };
        let exchanges = self
            .departures_ps(start_ps, req.frames)
            .into_iter()
            .enumerate()
            .map(|(k, t1_bench_ps)| {
                let late = delays_ps.get(k).copied().unwrap_or(0);
                self.exchange(t1_bench_ps.saturating_add(late), &conditions)
            })
            .collect();
        BurstOutcome {
            exchanges,
            duration_ps,
        }
    }

    /// What the DUT reports for a burst `req` whose exchanges came out as `exchanges` (from
    /// [`SimBench::run_burst`], after any injected failures): the same rows in the timestamps
    /// form, otherwise what its firmware computes from them (`device_report`).
    pub fn report(&mut self, exchanges: Vec<DeviceExchange>, req: &BurstRequest) -> DeviceReport {
        let rate_reading_sigma_ppm = if req.bw_mhz == 0 || req.center_mhz == 0 {
            0.0
        } else {
            let bw_hz = f64::from(req.bw_mhz) * 1e6;
            let snr_db = self.dut.receiver.snr_db(self.rx_power_dut_dbm(), bw_hz);
            rate_reading_sigma_ppm(snr_db, bw_hz, req.center_mhz)
        };
        let conditions = BurstConditions {
            clock_ppm: self.dut.clock.rate_ppm(),
            rate_reading_sigma_ppm,
        };
        self.firmware.report(exchanges, &conditions)
    }

    /// The form the DUT reports in.
    pub fn reports(&self) -> DutReports {
        self.firmware.reports()
    }

    /// One exchange whose FTM frame leaves the reference at bench time `t1_bench_ps`.
    fn exchange(&mut self, t1_bench_ps: u64, c: &Conditions) -> DeviceExchange {
        // Every draw happens whatever the outcome, so a lost frame never shifts later noise.
        let dut_level_dbm = measure(&mut self.streams.level, c.dut_dbm, self.dut.rssi_noise_db);
        let ref_level_dbm = measure(
            &mut self.streams.level,
            c.ref_dbm,
            self.reference.rssi_noise_db,
        );
        let dut_gain = self.dut.agc.update(dut_level_dbm);
        let ref_gain = self.reference.agc.update(ref_level_dbm);
        let lost = self.streams.loss.random::<f64>() < c.loss_probability;
        let s = &mut self.streams;
        let dut_toa =
            self.dut
                .receiver
                .draw_toa_error(c.dut_dbm, c.bw_hz, &mut s.timing, &mut s.late);
        let ref_toa =
            self.reference
                .receiver
                .draw_toa_error(c.ref_dbm, c.bw_hz, &mut s.timing, &mut s.late);

        let t1_ps = self.reference.clock.read_ps(t1_bench_ps, 0.0);
        if lost {
            return DeviceExchange {
                t1_ps: Some(t1_ps),
                ..DeviceExchange::empty(STATUS_LOST)
            };
        }
        // Offsets from T1 in bench picoseconds: small, so f64 keeps sub-picosecond detail.
        let t2_offset_ps =
            c.tof_ps + self.dut_rx_delay_now_ps(dut_gain) + c.burst_offset_ps + dut_toa.error_ps;
        let t2_ps = self.dut.clock.read_ps(t1_bench_ps, t2_offset_ps);
        let t3_ps = wrapping_add_ps(t2_ps, self.turnaround_ps);
        let t4_offset_ps = t2_offset_ps
            + c.turnaround_bench_ps
            + self.dut_tx_delay_ps
            + c.tof_ps
            + self.reference.rx_delay_ps(ref_gain)
            + ref_toa.error_ps;
        let t4_ps = self.reference.clock.read_ps(t1_bench_ps, t4_offset_ps);
        DeviceExchange {
            t1_ps: Some(t1_ps),
            t2_ps: Some(t2_ps),
            t3_ps: Some(t3_ps),
            t4_ps: Some(t4_ps),
            dut_gain: Some(dut_gain),
            dut_rssi_dbm: Some(report_rssi_dbm(dut_level_dbm)),
            // A single-state reference reports Some(0): one gain state is still a state, and a
            // uniform column keeps the fitter's lookup in the reference table simple.
            ref_gain: Some(ref_gain),
            ..DeviceExchange::empty(STATUS_OK)
        }
    }
}

/// What holds for every exchange of one burst.
struct Conditions {
    bw_hz: f64,
    dut_dbm: f64,
    ref_dbm: f64,
    /// One-way path delay at the burst's attenuation.
    tof_ps: f64,
    loss_probability: f64,
    /// The burst's common timing offset (a channel-estimate bias re-drawn each burst).
    burst_offset_ps: f64,
    /// The DUT's turnaround count expressed in bench time.
    turnaround_bench_ps: f64,
}

/// A receiver's measurement of a level: the true level plus Gaussian noise. Always draws once.
fn measure(rng: &mut ChaCha8Rng, level_dbm: f64, noise_db: f64) -> f64 {
    let z: f64 = StandardNormal.sample(rng);
    level_dbm + z * noise_db
}

/// RSSI as devices report it: in 0.5 dB steps.
fn report_rssi_dbm(level_dbm: f64) -> f64 {
    (level_dbm * 2.0).round() / 2.0
}

fn check_path(path: &PathFacts) -> Result<(), KeyError> {
    let keys = [
        ("path.cable_delay_ps", path.cable_delay_ps),
        ("path.fixed_loss_db", path.fixed_loss_db),
        ("path.atten_delay_ps_per_db", path.atten_delay_ps_per_db),
    ];
    match keys.iter().find(|(_, v)| !v.is_finite()) {
        Some((key, v)) => Err(KeyError::new(
            *key,
            format!("{v} is not a finite number"),
            "give a plain number",
        )),
        None => Ok(()),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::bench::PerGain;

    /// Design §4 contract keys with every noise switched off: no jitter, no burst offset, no late
    /// paths, no RSSI noise, a processing gain that makes the Cramér–Rao term negligible. The
    /// reference has two gain states with different K to exercise its table.
    const NOISE_FREE: &str = r#"
        seed = 1
        tx_power_dbm = 15.0
        [dut]
        tx_delay_ps = 1500.0
        rx_delay_ps = [900.0, 1150.0, 1400.0]
        gain_thresholds_dbm = [-30.0, -55.0]
        clock_ppm = 25.0
        jitter_ps = 0.0
        outlier_rate = 0.0
        processing_gain_db = 200.0
        rssi_noise_db = 0.0
        burst_offset_ps = 0.0
        [reference]
        delay_ps = [2800.0, 2950.0]
        gain_thresholds_dbm = [-45.0]
        jitter_ps = 0.0
        processing_gain_db = 200.0
        rssi_noise_db = 0.0
    "#;

    fn noise_free() -> SimTruth {
        toml::from_str(NOISE_FREE).expect("test truth parses")
    }

    fn path() -> PathFacts {
        PathFacts {
            cable_delay_ps: 6100.0,
            fixed_loss_db: 8.0,
            atten_delay_ps_per_db: 0.5,
        }
    }

    fn bench(truth: &SimTruth, seed: u64) -> SimBench {
        SimBench::new(truth, &path(), seed).expect("test truth is valid")
    }

    const BURST_80: BurstRequest = BurstRequest {
        frames: 64,
        center_mhz: 5500,
        bw_mhz: 80,
    };

    /// `a − b` on a 48-bit counter, in the signed range (design §2).
    fn wrapped_diff_ps(a: u64, b: u64) -> i64 {
        let m = COUNTER_MODULUS as i64;
        let d = (a as i64 - b as i64).rem_euclid(m);
        if d >= m / 2 {
            d - m
        } else {
            d
        }
    }

    fn ok(outcome: &BurstOutcome) -> Vec<&DeviceExchange> {
        outcome
            .exchanges
            .iter()
            .filter(|x| x.status == STATUS_OK)
            .collect()
    }

    fn stamps(x: &DeviceExchange) -> [u64; 4] {
        [x.t1_ps, x.t2_ps, x.t3_ps, x.t4_ps].map(|t| t.expect("ok exchange has all stamps"))
    }

    /// Least-squares slope of t2 against t1 over a burst: the initiator/responder rate ratio
    /// (tests/data/SOURCES.md §7, the 802.1AS neighbour-rate-ratio idea).
    fn rate_ratio(xs: &[&DeviceExchange]) -> f64 {
        let [t1_0, t2_0, _, _] = stamps(xs[0]);
        let pts: Vec<(f64, f64)> = xs
            .iter()
            .map(|x| {
                let [t1, t2, _, _] = stamps(x);
                (
                    wrapped_diff_ps(t1, t1_0) as f64,
                    wrapped_diff_ps(t2, t2_0) as f64,
                )
            })
            .collect();
        let n = pts.len() as f64;
        let mx = pts.iter().map(|p| p.0).sum::<f64>() / n;
        let my = pts.iter().map(|p| p.1).sum::<f64>() / n;
        let sxy: f64 = pts.iter().map(|p| (p.0 - mx) * (p.1 - my)).sum();
        let sxx: f64 = pts.iter().map(|p| (p.0 - mx).powi(2)).sum();
        sxy / sxx
    }

    /// (t4 − t1) − (t3 − t2): the uncorrected RTT.
    fn naive_rtt_ps(x: &DeviceExchange) -> f64 {
        let [t1, t2, t3, t4] = stamps(x);
        (wrapped_diff_ps(t4, t1) - wrapped_diff_ps(t3, t2)) as f64
    }

    /// (t4 − t1) − (t3 − t2)/r: the initiator's interval in the responder's timebase (tests/data/SOURCES.md §7:
    /// divide, not multiply).
    fn corrected_rtt_ps(x: &DeviceExchange, ratio: f64) -> f64 {
        let [t1, t2, t3, t4] = stamps(x);
        wrapped_diff_ps(t4, t1) as f64 - wrapped_diff_ps(t3, t2) as f64 / ratio
    }

    /// What the round trip should hold beyond the DUT's K: 2·tof + K_ref(g_ref).
    fn bench_part_ps(truth: &SimTruth, atten_db: f64, x: &DeviceExchange) -> f64 {
        let g_ref = x.ref_gain.expect("ok exchange reports ref gain");
        2.0 * path().one_way_delay_ps(atten_db) + truth.ref_k_ps(g_ref).expect("ref state in table")
    }

    fn wrapped_within(xs: &[&DeviceExchange], pick: fn(&DeviceExchange) -> Option<u64>) -> bool {
        xs.windows(2).any(|w| pick(w[1]) < pick(w[0]))
    }

    /// Bench time at which `clock`, read at offset 0, shows `count_ps` (first time after zero).
    fn bench_time_at_count(clock: &Counter48, count_ps: u64, ppm: f64) -> u64 {
        let ticks = (count_ps + COUNTER_MODULUS - clock.read_ps(0, 0.0)) % COUNTER_MODULUS;
        (ticks as f64 / (1.0 + ppm * 1e-6)) as u64
    }

    #[test]
    fn noise_free_bench_recovers_true_k_for_every_gain_across_wraps() {
        // Design §2 de-embedding: K_dut = RTT_corr − 2·tof − K_ref(g_ref). Power at the DUT is
        // 15 − 8 − A dBm; these settings sit mid-plateau of gain states 0, 1, 2.
        for ppm in [-25.0, 25.0] {
            let mut truth = noise_free();
            truth.dut.clock_ppm = ppm;
            let mut sim = bench(&truth, 7);
            // Start one burst 20 ms before the DUT counter wraps and one 20 ms before the
            // reference's does, so both wrap mid-burst (64 exchanges span 69 ms).
            let dut_wrap_ps =
                bench_time_at_count(&sim.dut.clock, 0, ppm).saturating_sub(20_000_000_000);
            let ref_wrap_ps =
                bench_time_at_count(&sim.reference.clock, 0, 0.0).saturating_sub(20_000_000_000);
            let (mut dut_wrapped, mut ref_wrapped) = (false, false);
            for (gain, atten_db) in [(0u32, 17.0), (1, 49.0), (2, 77.0)] {
                sim.set_atten_db(atten_db);
                for start_ps in [dut_wrap_ps, ref_wrap_ps] {
                    let out = sim.run_burst(start_ps, &BURST_80);
                    let xs = ok(&out);
                    assert!(xs.len() > 60, "almost no loss this far above sensitivity");
                    dut_wrapped |= wrapped_within(&xs, |x| x.t2_ps);
                    ref_wrapped |= wrapped_within(&xs, |x| x.t1_ps);
                    let ratio = rate_ratio(&xs);
                    assert!((ratio - (1.0 + ppm * 1e-6)).abs() < 1e-10, "ratio {ratio}");
                    let want = truth.dut_k_ps(gain).expect("gain in table");
                    for x in &xs {
                        assert_eq!(x.dut_gain, Some(gain));
                        let k = corrected_rtt_ps(x, ratio) - bench_part_ps(&truth, atten_db, x);
                        assert!(
                            (k - want).abs() <= 2.0,
                            "ppm {ppm} gain {gain}: {k} vs {want}"
                        );
                    }
                }
            }
            assert!(
                dut_wrapped && ref_wrapped,
                "both counters must wrap inside a burst"
            );
        }
    }

    #[test]
    fn uncorrected_rtt_is_off_by_turnaround_times_ppm() {
        // tests/data/SOURCES.md §7: the naive RTT errs by −turnaround·e; here turnaround = 44 µs frame + 16 µs
        // SIFS (IEEE 802.11 OFDM SIFS) = 60 µs, e = ±25 ppm, so ∓1500 ps.
        for ppm in [-25.0, 25.0] {
            let mut truth = noise_free();
            truth.dut.clock_ppm = ppm;
            let mut sim = bench(&truth, 11);
            sim.set_atten_db(49.0);
            let out = sim.run_burst(3_000_000_000_000, &BURST_80);
            let want = truth.dut_k_ps(1).expect("gain 1 in table");
            for x in ok(&out) {
                let err = naive_rtt_ps(x) - bench_part_ps(&truth, 49.0, x) - want;
                let expected = -60_000_000.0 * ppm * 1e-6;
                assert!(
                    (err - expected).abs() <= 2.0,
                    "ppm {ppm}: {err} vs {expected}"
                );
                assert!((err.abs() - 1500.0).abs() <= 2.0);
            }
        }
    }

    #[test]
    fn random_counter_starts_wrap_within_a_long_run() {
        // 48-bit counters wrap every 281.47 s (tests/data/SOURCES.md §6); an hour of bursts must see wraps.
        let mut sim = bench(&noise_free(), 3);
        sim.set_atten_db(30.0);
        let short = BurstRequest {
            frames: 2,
            ..BURST_80
        };
        let t1s: Vec<u64> = (0..60u64)
            .filter_map(|minute| {
                sim.run_burst(minute * 60_000_000_000_000, &short).exchanges[0].t1_ps
            })
            .collect();
        assert!(t1s.windows(2).any(|w| w[1] < w[0]), "no wrap in an hour");
        assert!(t1s.iter().all(|&t| t < COUNTER_MODULUS));
    }

    #[test]
    fn exchanges_are_spaced_by_the_interval_after_setup() {
        // Defaults: 5 ms setup, 1 ms interval.
        let mut sim = bench(&noise_free(), 5);
        let start_ps = 42_000_000;
        let out = sim.run_burst(start_ps, &BURST_80);
        assert_eq!(out.duration_ps, 5_000_000_000 + 64 * 1_000_000_000);
        assert_eq!(out.exchanges.len(), 64);
        let t1: Vec<u64> = out.exchanges.iter().filter_map(|x| x.t1_ps).collect();
        let gaps: Vec<i64> = t1.windows(2).map(|w| wrapped_diff_ps(w[1], w[0])).collect();
        assert!(gaps.iter().all(|&g| g == 1_000_000_000));
        // t3 − t2 is exactly the turnaround on the DUT's counter.
        for x in ok(&out) {
            let [_, t2, t3, _] = stamps(x);
            assert_eq!(wrapped_diff_ps(t3, t2), 60_000_000);
        }
    }

    #[test]
    fn nominal_receive_levels() {
        // Design §2: P_rx = P_tx − fixed_loss − A.
        let mut sim = bench(&noise_free(), 1);
        sim.set_atten_db(20.0);
        assert_eq!(sim.atten_db(), 20.0);
        assert_eq!(sim.rx_power_dut_dbm(), -13.0);
        assert_eq!(sim.rx_power_ref_dbm(), -13.0);
        assert_eq!(sim.ambient_c(), None);
    }

    #[test]
    fn near_a_threshold_one_attenuation_yields_two_gain_states() {
        // Design §2: group by reported state, not by sweep point. Power −30 dBm sits on the first
        // threshold; 1 dB of RSSI noise sends the AGC both ways. K still comes out per state.
        let mut truth = noise_free();
        truth.dut.rssi_noise_db = 1.0;
        let mut sim = bench(&truth, 9);
        sim.set_atten_db(37.0);
        let out = sim.run_burst(0, &BURST_80);
        let xs = ok(&out);
        let ratio = rate_ratio(&xs);
        let mut seen = [false; 2];
        for x in &xs {
            let g = x.dut_gain.expect("ok exchange reports gain");
            seen[g as usize] = true;
            let k = corrected_rtt_ps(x, ratio) - bench_part_ps(&truth, 37.0, x);
            assert!((k - truth.dut_k_ps(g).expect("gain in table")).abs() <= 2.0);
            let rssi = x.dut_rssi_dbm.expect("ok exchange reports rssi");
            assert_eq!((rssi * 2.0).fract(), 0.0, "RSSI in 0.5 dB steps");
        }
        assert_eq!(seen, [true, true]);
    }

    #[test]
    fn reference_reports_its_own_gain_state() {
        // Reference threshold −45 dBm: level −42 → 0, −70 → 1. A one-state reference says 0.
        let mut sim = bench(&noise_free(), 2);
        sim.set_atten_db(49.0);
        assert!(ok(&sim.run_burst(0, &BURST_80))
            .iter()
            .all(|x| x.ref_gain == Some(0)));
        sim.set_atten_db(77.0);
        assert!(ok(&sim.run_burst(0, &BURST_80))
            .iter()
            .all(|x| x.ref_gain == Some(1)));
        let mut truth = noise_free();
        truth.reference.delay_ps = PerGain::Same(2800.0);
        truth.reference.gain_thresholds_dbm.clear();
        let mut single = bench(&truth, 2);
        single.set_atten_db(77.0);
        assert!(ok(&single.run_burst(0, &BURST_80))
            .iter()
            .all(|x| x.ref_gain == Some(0)));
    }

    fn loss_fraction(sim: &mut SimBench, atten_db: f64, req: &BurstRequest) -> f64 {
        sim.set_atten_db(atten_db);
        let out = sim.run_burst(0, req);
        let lost = out
            .exchanges
            .iter()
            .filter(|x| x.status == STATUS_LOST)
            .count();
        lost as f64 / out.exchanges.len() as f64
    }

    #[test]
    fn frame_loss_rises_near_sensitivity() {
        // 20 MHz, NF 6 dB: floor −94.99 dBm (−174 dBm/Hz, common practice); half loss at 4 dB
        // SNR, i.e. −90.99 dBm = 97.99 dB of attenuation.
        let mut sim = bench(&noise_free(), 4);
        let req = BurstRequest {
            frames: 400,
            center_mhz: 5180,
            bw_mhz: 20,
        };
        let far = loss_fraction(&mut sim, 80.0, &req);
        let edge = loss_fraction(&mut sim, 97.99, &req);
        let beyond = loss_fraction(&mut sim, 102.0, &req);
        assert_eq!(far, 0.0);
        // Binomial, n = 400, p = 0.5: sd 0.025; 4 sd either side.
        assert!((edge - 0.5).abs() < 0.1, "{edge}");
        assert!(beyond > 0.95, "{beyond}");
    }

    #[test]
    fn lost_exchange_reports_departure_only() {
        let mut sim = bench(&noise_free(), 4);
        sim.set_atten_db(140.0);
        let out = sim.run_burst(0, &BURST_80);
        for x in &out.exchanges {
            assert_eq!(x.status, STATUS_LOST);
            assert!(x.t1_ps.is_some());
            assert_eq!((x.t2_ps, x.t3_ps, x.t4_ps), (None, None, None));
            assert_eq!((x.dut_gain, x.dut_rssi_dbm, x.ref_gain), (None, None, None));
        }
    }

    #[test]
    fn zero_bandwidth_burst_is_rejected() {
        let mut sim = bench(&noise_free(), 4);
        let req = BurstRequest {
            frames: 3,
            center_mhz: 5500,
            bw_mhz: 0,
        };
        let out = sim.run_burst(0, &req);
        assert_eq!(out.exchanges.len(), 3);
        assert!(out
            .exchanges
            .iter()
            .all(|x| x.status == STATUS_REJECTED && x.t1_ps.is_none()));
    }

    fn sample_sd(v: &[f64]) -> f64 {
        let n = v.len() as f64;
        let mean = v.iter().sum::<f64>() / n;
        (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt()
    }

    #[test]
    fn rtt_spread_follows_the_cramer_rao_bound() {
        // tests/data/SOURCES.md §9: sigma ∝ 1/sqrt(SNR); 16× less SNR (−12.04 dB) → 4× the spread. Jitter off
        // and no processing gain so the bound dominates; both levels are in gain state 2.
        let mut truth = noise_free();
        truth.dut.processing_gain_db = 0.0;
        truth.reference.processing_gain_db = 0.0;
        let mut sim = bench(&truth, 13);
        let req = BurstRequest {
            frames: 2000,
            ..BURST_80
        };
        let spread = |sim: &mut SimBench, atten_db: f64| {
            sim.set_atten_db(atten_db);
            let out = sim.run_burst(0, &req);
            let xs = ok(&out);
            let ratio = rate_ratio(&xs);
            let rtts: Vec<f64> = xs.iter().map(|x| corrected_rtt_ps(x, ratio)).collect();
            sample_sd(&rtts)
        };
        let strong = spread(&mut sim, 67.0);
        let weak = spread(&mut sim, 67.0 + 10.0 * 16f64.log10());
        // Prediction for the strong level: two independent arrivals, each at the bound.
        let rx = &sim.dut.receiver;
        let predicted = rx.sigma_ps(-60.0, 80e6) * 2f64.sqrt();
        assert!(
            (strong / predicted - 1.0).abs() < 0.08,
            "{strong} vs {predicted}"
        );
        assert!((weak / strong - 4.0).abs() < 0.3, "ratio {}", weak / strong);
    }

    #[test]
    fn burst_offset_is_shared_within_a_burst() {
        // Design §2 / brief: a per-burst common offset, so the burst is the unit of uncertainty.
        let mut truth = noise_free();
        truth.dut.burst_offset_ps = 30.0;
        let mut sim = bench(&truth, 17);
        sim.set_atten_db(49.0);
        let req = BurstRequest {
            frames: 8,
            ..BURST_80
        };
        let mut means = Vec::new();
        for b in 0..300u64 {
            let out = sim.run_burst(b * 100_000_000_000, &req);
            let xs = ok(&out);
            let ratio = rate_ratio(&xs);
            let rtts: Vec<f64> = xs.iter().map(|x| corrected_rtt_ps(x, ratio)).collect();
            let spread = rtts.iter().fold(0.0f64, |m, r| m.max((r - rtts[0]).abs()));
            assert!(spread <= 2.0, "within-burst spread {spread}");
            means.push(rtts.iter().sum::<f64>() / rtts.len() as f64);
        }
        // sd estimate from 300 bursts: relative error about 4 %; allow 20 %.
        let sd = sample_sd(&means);
        assert!((sd / 30.0 - 1.0).abs() < 0.2, "{sd}");
    }

    #[test]
    fn late_detection_rate_matches_configuration() {
        // Late paths add ≥ one sample period (12.5 ns at 80 MHz), far above the noise-free
        // residual, so each is visible. P(exchange late) = 1 − (1 − p_dut)(1 − p_ref).
        let mut truth = noise_free();
        truth.dut.outlier_rate = 0.03;
        truth.reference.outlier_rate = 0.02;
        let mut sim = bench(&truth, 19);
        sim.set_atten_db(49.0);
        let req = BurstRequest {
            frames: 1000,
            ..BURST_80
        };
        let (mut late, mut n) = (0usize, 0usize);
        for b in 0..20u64 {
            let out = sim.run_burst(b * 2_000_000_000_000, &req);
            let xs = ok(&out);
            // Late t2 values would bend a least-squares slope; the configured ratio keeps the
            // check on the late paths alone.
            let ratio = 1.0 + truth.dut.clock_ppm * 1e-6;
            for x in &xs {
                let excess = corrected_rtt_ps(x, ratio)
                    - bench_part_ps(&truth, 49.0, x)
                    - truth.dut_k_ps(1).expect("gain 1 in table");
                assert!(excess > -2.0, "never early: {excess}");
                if excess >= 12_500.0 - 2.0 {
                    late += 1;
                } else {
                    assert!(excess <= 2.0, "clean exchanges are exact: {excess}");
                }
                n += 1;
            }
        }
        let p = 1.0 - (1.0 - 0.03) * (1.0 - 0.02);
        let frac = late as f64 / n as f64;
        // Binomial: 4.5 sd either side of p (n = 20 000).
        let bound = 4.5 * (p * (1.0 - p) / n as f64).sqrt();
        assert!((frac - p).abs() < bound, "{frac} vs {p} ± {bound}");
    }

    #[test]
    fn contract_example_bench_is_unbiased_under_default_noise() {
        // Design §4's example truth with every other key at its default (300 ps jitter, 1 %
        // late paths, 1 dB RSSI noise, 30 ps burst offsets, 8 ppm). The median de-embedded K
        // over 640 exchanges has a standard error near 25 ps; 100 ps is four of them.
        let truth: SimTruth = toml::from_str(
            r#"
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
            "#,
        )
        .expect("design §4 example parses");
        let mut sim = bench(&truth, 23);
        sim.set_atten_db(49.0);
        let mut ks = Vec::new();
        for b in 0..10u64 {
            let out = sim.run_burst(b * 500_000_000_000, &BURST_80);
            let xs = ok(&out);
            let ratio = rate_ratio(&xs);
            ks.extend(
                xs.iter()
                    .filter(|x| x.dut_gain == Some(1))
                    .map(|x| corrected_rtt_ps(x, ratio) - bench_part_ps(&truth, 49.0, x)),
            );
        }
        ks.sort_by(f64::total_cmp);
        let median = ks[ks.len() / 2];
        let want = truth.dut_k_ps(1).expect("gain 1 in table");
        assert!(ks.len() > 600);
        assert!((median - want).abs() < 100.0, "{median} vs {want}");
    }

    #[test]
    fn same_seed_same_outcome_different_seed_different() {
        let mut truth = noise_free();
        truth.dut.jitter_ps = 300.0;
        truth.dut.rssi_noise_db = 1.0;
        truth.dut.outlier_rate = 0.05;
        truth.dut.burst_offset_ps = 30.0;
        let run = |seed: u64| {
            let mut sim = bench(&truth, seed);
            [37.0, 60.0, 95.0]
                .map(|a| {
                    sim.set_atten_db(a);
                    sim.run_burst(1_000_000_000_000, &BURST_80)
                })
                .to_vec()
        };
        assert_eq!(run(21), run(21));
        assert_ne!(run(21), run(22));
    }

    #[test]
    fn seed_argument_overrides_truth_seed() {
        let mut a = noise_free();
        a.seed = 1;
        let mut b = noise_free();
        b.seed = 2;
        assert_eq!(
            bench(&a, 5).run_burst(0, &BURST_80),
            bench(&b, 5).run_burst(0, &BURST_80)
        );
    }

    #[test]
    fn invalid_truth_is_refused() {
        let mut truth = noise_free();
        truth.dut.gain_thresholds_dbm.pop();
        let err = SimBench::new(&truth, &path(), 1).expect_err("threshold count mismatch");
        assert_eq!(err.key, "sim.dut.gain_thresholds_dbm");
        let mut bad_path = path();
        bad_path.cable_delay_ps = f64::NAN;
        let err = SimBench::new(&noise_free(), &bad_path, 1).expect_err("NaN path delay");
        assert_eq!(err.key, "path.cable_delay_ps");
    }
}
