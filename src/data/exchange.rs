//! One ranging exchange as recorded: the contract row of `exchanges.csv`.
//!
//! Timestamps stay raw (unsigned, possibly wrapped 48-bit picosecond counts) so the file keeps
//! what the device said; every correction happens in the fitter.

use serde::{Deserialize, Serialize};

/// One past the largest timestamp: FTM counters are 48 bits wide (IEEE 802.11-2016, the FTM
/// frame's 6-octet TOD/TOA fields), so a larger value is no reading a device gave.
pub const TIMESTAMP_END_PS: u64 = 1 << 48;

/// Status label of an exchange that completed and reported all four timestamps.
pub const STATUS_OK: &str = "ok";

/// What a ranging device reports for one exchange of a burst.
#[derive(Debug, Clone, PartialEq)]
pub struct DeviceExchange {
    /// Responder (reference) departure time, responder clock, raw counter.
    pub t1_ps: Option<u64>,
    /// Initiator (DUT) arrival time, initiator clock, raw counter.
    pub t2_ps: Option<u64>,
    /// Initiator (DUT) departure time of the reply, initiator clock, raw counter.
    pub t3_ps: Option<u64>,
    /// Responder (reference) arrival time of the reply, responder clock, raw counter.
    pub t4_ps: Option<u64>,
    /// Receive gain state the DUT's AGC chose for this exchange.
    pub dut_gain: Option<u32>,
    /// Receive level the DUT reported.
    pub dut_rssi_dbm: Option<f64>,
    /// Receive gain state of the reference unit, where it reports one.
    pub ref_gain: Option<u32>,
    /// `ok` or a short error label (`lost`, `timeout`, …).
    pub status: String,
    /// Round-trip time the device computed itself (per frame, or a burst's average), clock
    /// corrected by the device, where it reports one instead of timestamps.
    pub rtt_ps: Option<f64>,
    /// Distance the device reported, in millimetres, with its own applied K already removed.
    pub range_mm: Option<f64>,
    /// Frames behind the report: 1 for one exchange, the successful frames of a burst average.
    pub frames: u32,
    /// The K the device says it removed before reporting `range_mm`, where it says.
    pub applied_k_ps: Option<f64>,
}

impl DeviceExchange {
    /// A report of one frame that carries nothing but `status`.
    pub fn empty(status: impl Into<String>) -> DeviceExchange {
        DeviceExchange {
            t1_ps: None,
            t2_ps: None,
            t3_ps: None,
            t4_ps: None,
            dut_gain: None,
            dut_rssi_dbm: None,
            ref_gain: None,
            status: status.into(),
            rtt_ps: None,
            range_mm: None,
            frames: 1,
            applied_k_ps: None,
        }
    }
}

/// One row of `exchanges.csv` (contract columns, in contract order; record version 2 appended
/// the last four).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Exchange {
    /// Name of the recipe stage that took the exchange.
    pub stage: String,
    /// Sweep point index within the stage (one attenuation setting).
    pub point: u32,
    /// Burst index within the point.
    pub burst: u32,
    /// Exchange index within the burst.
    pub seq: u32,
    /// Attenuator setting in dB.
    pub atten_db: f64,
    /// Channel center frequency in MHz.
    pub center_mhz: u32,
    /// Channel bandwidth in MHz.
    pub bw_mhz: u32,
    /// Raw responder departure counter.
    pub t1_ps: Option<u64>,
    /// Raw initiator arrival counter.
    pub t2_ps: Option<u64>,
    /// Raw initiator departure counter.
    pub t3_ps: Option<u64>,
    /// Raw responder arrival counter.
    pub t4_ps: Option<u64>,
    /// DUT receive gain state.
    pub dut_gain: Option<u32>,
    /// DUT receive level.
    pub dut_rssi_dbm: Option<f64>,
    /// Reference receive gain state.
    pub ref_gain: Option<u32>,
    /// Temperature at the DUT, where the bench measures one.
    pub temp_c: Option<f64>,
    /// `ok` or a short error label.
    pub status: String,
    /// Bench time of the exchange or burst, seconds since the run began (empty in version 1);
    /// written to the microsecond.
    #[serde(serialize_with = "bench_time")]
    pub time_s: Option<f64>,
    /// Round-trip time the device reported itself, ps (empty when it gave timestamps).
    pub rtt_ps: Option<f64>,
    /// Distance the device reported, mm, its applied K removed (empty unless it reports range).
    pub range_mm: Option<f64>,
    /// Frames behind the row: 1 for a per-exchange row (and for every row of version 1).
    #[serde(default = "one_frame")]
    pub frames: u32,
}

/// A row of a file without `frames` stands for one exchange.
fn one_frame() -> u32 {
    1
}

/// Bench time as `exchanges.csv` holds it: to the microsecond, which a short decimal spells.
fn bench_time<S: serde::Serializer>(time_s: &Option<f64>, s: S) -> Result<S::Ok, S::Error> {
    match time_s {
        Some(t) => s.serialize_str(&super::record_version::time_text(*t)),
        None => s.serialize_none(),
    }
}

impl Default for Exchange {
    fn default() -> Self {
        Exchange {
            stage: String::new(),
            point: 0,
            burst: 0,
            seq: 0,
            atten_db: 0.0,
            center_mhz: 0,
            bw_mhz: 0,
            t1_ps: None,
            t2_ps: None,
            t3_ps: None,
            t4_ps: None,
            dut_gain: None,
            dut_rssi_dbm: None,
            ref_gain: None,
            temp_c: None,
            status: String::new(),
            time_s: None,
            rtt_ps: None,
            range_mm: None,
            frames: 1,
        }
    }
}

/// Where and how a burst was taken: everything a row holds besides what the device reported.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Taken<'a> {
    /// Stage name.
    pub stage: &'a str,
    /// Point index within the stage.
    pub point: u32,
    /// Burst index within the point.
    pub burst: u32,
    /// Attenuator setting.
    pub atten_db: f64,
    /// Channel center, MHz.
    pub center_mhz: u32,
    /// Bandwidth, MHz.
    pub bw_mhz: u32,
    /// Temperature at the DUT, where measured.
    pub temp_c: Option<f64>,
    /// Bench time the burst began, seconds since the run began.
    pub time_s: Option<f64>,
}

impl Exchange {
    /// The row of the `seq`-th exchange `d` of a burst taken as `at` says.
    pub fn recorded(at: &Taken<'_>, seq: u32, d: DeviceExchange) -> Exchange {
        Exchange {
            stage: at.stage.to_string(),
            point: at.point,
            burst: at.burst,
            seq,
            atten_db: at.atten_db,
            center_mhz: at.center_mhz,
            bw_mhz: at.bw_mhz,
            t1_ps: d.t1_ps,
            t2_ps: d.t2_ps,
            t3_ps: d.t3_ps,
            t4_ps: d.t4_ps,
            dut_gain: d.dut_gain,
            dut_rssi_dbm: d.dut_rssi_dbm,
            ref_gain: d.ref_gain,
            temp_c: at.temp_c,
            status: d.status,
            time_s: at.time_s,
            rtt_ps: d.rtt_ps,
            range_mm: d.range_mm,
            frames: d.frames,
        }
    }

    /// True when the exchange completed and carries everything the fitter needs: a gain state
    /// and a timing (all four timestamps, a device-computed RTT, or a range).
    pub fn is_usable(&self) -> bool {
        self.status == STATUS_OK && self.dut_gain.is_some() && self.is_timed()
    }

    /// True when the row carries a timing in some form: all four timestamps, an RTT or a range.
    pub fn is_timed(&self) -> bool {
        let counters = self.t1_ps.is_some()
            && self.t2_ps.is_some()
            && self.t3_ps.is_some()
            && self.t4_ps.is_some();
        counters || self.rtt_ps.is_some() || self.range_mm.is_some()
    }
}
