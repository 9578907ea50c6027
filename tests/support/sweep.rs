//! A sweep simulated in process, for tests that fit many seeds without the binary: the
//! simulator's bursts at each attenuation, recorded as the runner records them.

use taucal::bench::PathFacts;
use taucal::data::{Exchange, Taken};
use taucal::sim::{BurstRequest, SimBench, SimTruth};

/// What each point of the sweep asks for.
#[derive(Clone, Copy)]
pub struct Sweep {
    /// The stage name the exchanges are recorded under.
    pub stage: &'static str,
    pub center_mhz: u32,
    pub bw_mhz: u32,
    /// Exchanges per burst.
    pub frames: u32,
    /// Bursts per point.
    pub bursts: u32,
    /// Bench time from one burst's end to the next one's start.
    pub gap_ps: u64,
}

impl Sweep {
    /// The exchanges of the sweep over `atten_db` (point numbers in that order) on a simulated
    /// bench of `truth` on `path`, seeded `seed`. One bench for the whole sweep, its time running
    /// on from burst to burst, as in a run.
    pub fn run(
        &self,
        truth: &SimTruth,
        path: &PathFacts,
        seed: u64,
        atten_db: impl IntoIterator<Item = f64>,
    ) -> Vec<Exchange> {
        let mut bench = SimBench::new(truth, path, seed).expect("valid truth");
        let mut rows = Vec::new();
        let mut now_ps = 0u64;
        for (point, atten_db) in atten_db.into_iter().enumerate() {
            bench.set_atten_db(atten_db);
            for burst in 0..self.bursts {
                let request = BurstRequest {
                    frames: self.frames,
                    center_mhz: self.center_mhz,
                    bw_mhz: self.bw_mhz,
                };
                let out = bench.run_burst(now_ps, &request);
                now_ps += out.duration_ps + self.gap_ps;
                let at = Taken {
                    stage: self.stage,
                    point: point as u32,
                    burst,
                    atten_db,
                    center_mhz: self.center_mhz,
                    bw_mhz: self.bw_mhz,
                    temp_c: None,
                    time_s: None,
                };
                rows.extend(
                    out.exchanges
                        .into_iter()
                        .enumerate()
                        .map(|(seq, d)| Exchange::recorded(&at, seq as u32, d)),
                );
            }
        }
        rows
    }
}
