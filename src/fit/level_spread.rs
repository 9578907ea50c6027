//! The spread of the receive levels a device reports at one attenuation, and the level noise
//! pooled from many such points: what a gain map's switch-point fit needs to know about the
//! noise behind the AGC's decisions.

/// Reported levels at one point: count, mean and sum of squared deviations (Welford's update,
/// stable for levels far from zero), and the coarsest grid every level sat on.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct LevelSpread {
    /// Levels seen.
    pub n: u64,
    /// Their mean.
    pub mean_dbm: f64,
    /// Sum of squared deviations from the mean.
    pub m2_db2: f64,
    /// The coarsest of [`GRIDS_DB`] that every level is a multiple of (0 when none is).
    pub grid_db: f64,
}

/// Reporting steps recognised, coarsest first. Devices report RSSI in whole, half or quarter
/// dB, or finer (common practice).
pub const GRIDS_DB: [f64; 5] = [1.0, 0.5, 0.25, 0.125, 0.1];

impl Default for LevelSpread {
    fn default() -> Self {
        LevelSpread {
            n: 0,
            mean_dbm: 0.0,
            m2_db2: 0.0,
            grid_db: GRIDS_DB[0],
        }
    }
}

impl LevelSpread {
    /// Adds one reported level (non-finite levels are ignored).
    pub fn push(&mut self, level_dbm: f64) {
        if !level_dbm.is_finite() {
            return;
        }
        self.n += 1;
        let d = level_dbm - self.mean_dbm;
        self.mean_dbm += d / self.n as f64;
        self.m2_db2 += d * (level_dbm - self.mean_dbm);
        let on = |g: f64| ((level_dbm / g).round() * g - level_dbm).abs() < 1e-6;
        self.grid_db = GRIDS_DB
            .into_iter()
            .filter(|&g| g <= self.grid_db)
            .find(|&g| on(g))
            .unwrap_or(0.0);
    }
}

/// Level noise, 1 sigma, pooled over points whose true level is constant within each: the
/// within-point variance less the rounding's own `grid²/12` (Sheppard's correction, common
/// practice), floored at zero. `None` with fewer than two degrees of freedom.
pub fn pooled_noise_db(points: &[LevelSpread]) -> Option<f64> {
    let used = points.iter().filter(|p| p.n >= 2);
    let (m2, dof, grid) = used.fold((0.0, 0u64, GRIDS_DB[0]), |(m2, dof, grid), p| {
        (m2 + p.m2_db2, dof + (p.n - 1), grid.min(p.grid_db))
    });
    (dof >= 2).then(|| (m2 / dof as f64 - grid * grid / 12.0).max(0.0).sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spread(levels: &[f64]) -> LevelSpread {
        let mut s = LevelSpread::default();
        for &l in levels {
            s.push(l);
        }
        s
    }

    #[test]
    fn welford_gives_the_two_pass_variance_far_from_zero() {
        // NIST StRD NumAcc3 in spirit (tests/data/SOURCES.md §1): large offset, small spread.
        // Computed from the definition: −60.5, −60.0, −59.5 → mean −60, Σd² = 0.5.
        let s = spread(&[-60.5, -60.0, -59.5]);
        assert_eq!(s.n, 3);
        assert!((s.mean_dbm + 60.0).abs() < 1e-12);
        assert!((s.m2_db2 - 0.5).abs() < 1e-12);
        assert_eq!(s.grid_db, 0.5);
        assert_eq!(spread(&[-60.25, -60.0]).grid_db, 0.25);
        assert_eq!(spread(&[-60.3]).grid_db, 0.1);
        assert_eq!(spread(&[-60.37]).grid_db, 0.0);
    }

    #[test]
    fn pooling_subtracts_the_rounding_variance() {
        // Two points, Σd² = 0.5 each on 2 dof: variance 0.25, less 0.5²/12 for the half-dB grid.
        let a = spread(&[-60.5, -60.0, -59.5]);
        let b = spread(&[-40.5, -40.0, -39.5]);
        let want = (0.25_f64 - 0.25 / 12.0).sqrt();
        assert!((pooled_noise_db(&[a, b]).expect("pooled") - want).abs() < 1e-12);
        // One level per point: nothing to pool.
        assert_eq!(pooled_noise_db(&[spread(&[-60.0]), spread(&[-40.0])]), None);
        // Constant levels: no noise.
        assert_eq!(pooled_noise_db(&[spread(&[-60.0; 4])]), Some(0.0));
    }
}
