//! Group delay τ = −dφ/dω of a transmission S-parameter, from its unwrapped phase: per
//! frequency point (for the ripple), and averaged over a channel's occupied band (what a
//! ranging exchange, spread over that band, sees).

use super::Complex;
use std::f64::consts::PI;

/// The phase of `s` at each point, unwrapped: a jump of more than π between neighbours is taken
/// as a wrap (so the file must sample the phase finely enough, less than π a step).
pub fn unwrapped_phase(s: &[Complex]) -> Vec<f64> {
    let mut out: Vec<f64> = Vec::with_capacity(s.len());
    let mut offset = 0.0;
    for (k, z) in s.iter().enumerate() {
        let raw = z.arg();
        if k > 0 {
            let step = raw + offset - out[k - 1];
            offset -= 2.0 * PI * (step / (2.0 * PI)).round();
        }
        out.push(raw + offset);
    }
    out
}

/// Group delay at each point, seconds: central differences of the unwrapped phase inside
/// (second order on uneven spacing), one-sided at the two ends.
pub fn point_delays_s(freq_hz: &[f64], s: &[Complex]) -> Vec<f64> {
    let phi = unwrapped_phase(s);
    let n = phi.len();
    let w: Vec<f64> = freq_hz.iter().map(|f| 2.0 * PI * f).collect();
    (0..n)
        .map(|i| {
            let d = if i == 0 {
                (phi[1] - phi[0]) / (w[1] - w[0])
            } else if i == n - 1 {
                (phi[n - 1] - phi[n - 2]) / (w[n - 1] - w[n - 2])
            } else {
                let (hs, hd) = (w[i] - w[i - 1], w[i + 1] - w[i]);
                (hs * hs * phi[i + 1] + (hd * hd - hs * hs) * phi[i] - hd * hd * phi[i - 1])
                    / (hs * hd * (hd + hs))
            };
            -d
        })
        .collect()
}

/// A channel's group delay through a measured path.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BandDelay {
    /// Mean over the band: the phase's fall across it over its width in radians per second.
    pub mean_s: f64,
    /// Smallest point delay inside the band.
    pub min_s: f64,
    /// Largest point delay inside the band.
    pub max_s: f64,
    /// The in-band ripple as a standard uncertainty: (max − min)/2 as the half-width of a
    /// rectangular distribution, over √3 (GUM 4.3.7).
    pub u_ripple_s: f64,
    /// Measured points inside the band.
    pub points: usize,
}

/// The group delay over `lo_hz..=hi_hz`. The band must lie within the file's frequencies.
pub fn band_delay(
    freq_hz: &[f64],
    s: &[Complex],
    lo_hz: f64,
    hi_hz: f64,
) -> Result<BandDelay, String> {
    let (first, last) = (freq_hz[0], freq_hz[freq_hz.len() - 1]);
    // Written so a NaN edge is refused too.
    let inside = lo_hz >= first && hi_hz <= last && lo_hz < hi_hz;
    if !inside {
        return Err(format!(
            "the band {:.3}–{:.3} MHz is not inside the file's {:.3}–{:.3} MHz",
            lo_hz / 1e6,
            hi_hz / 1e6,
            first / 1e6,
            last / 1e6
        ));
    }
    let phi = unwrapped_phase(s);
    let at = |f: f64| {
        let k = freq_hz
            .partition_point(|x| *x <= f)
            .clamp(1, freq_hz.len() - 1);
        let (f0, f1) = (freq_hz[k - 1], freq_hz[k]);
        phi[k - 1] + (phi[k] - phi[k - 1]) * (f - f0) / (f1 - f0)
    };
    let mean_s = -(at(hi_hz) - at(lo_hz)) / (2.0 * PI * (hi_hz - lo_hz));
    let inside: Vec<f64> = point_delays_s(freq_hz, s)
        .into_iter()
        .zip(freq_hz)
        .filter(|(_, f)| **f >= lo_hz && **f <= hi_hz)
        .map(|(d, _)| d)
        .collect();
    let (min_s, max_s) = inside
        .iter()
        .fold((mean_s, mean_s), |(lo, hi), d| (lo.min(*d), hi.max(*d)));
    Ok(BandDelay {
        mean_s,
        min_s,
        max_s,
        u_ripple_s: (max_s - min_s) / 2.0 / 3f64.sqrt(),
        points: inside.len(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// S21 of a lossless matched line of electrical delay `tau_s`, with an echo of relative
    /// size `echo` arriving `t_echo_s` later (a mismatch's ripple).
    fn line(freq_hz: &[f64], tau_s: f64, echo: f64, t_echo_s: f64) -> Vec<Complex> {
        freq_hz
            .iter()
            .map(|f| {
                let w = 2.0 * PI * f;
                let (re, im) = (
                    (-w * tau_s).cos() + echo * (-w * (tau_s + t_echo_s)).cos(),
                    (-w * tau_s).sin() + echo * (-w * (tau_s + t_echo_s)).sin(),
                );
                Complex { re, im }
            })
            .collect()
    }

    #[test]
    fn an_ideal_line_is_its_length_over_its_velocity() {
        // 1.2 m of cable with velocity factor 0.70: τ = L / (vf·c) = 5718.2 ps (c exact, SI).
        let tau = 1.2 / (0.70 * 299_792_458.0);
        let f: Vec<f64> = (0..=600).map(|k| 4.9e9 + 2e6 * f64::from(k)).collect();
        let s = line(&f, tau, 0.0, 0.0);
        for d in point_delays_s(&f, &s) {
            assert!((d - tau).abs() < 1e-15, "{d} vs {tau}");
        }
        let b = band_delay(&f, &s, 5.14e9, 5.22e9).expect("in band");
        assert!(
            (b.mean_s * 1e12 - 5718.2).abs() < 0.05,
            "{}",
            b.mean_s * 1e12
        );
        assert!(b.u_ripple_s < 1e-16 && b.points == 41, "{b:?}");
    }

    #[test]
    fn an_echo_gives_ripple_around_the_mean_and_a_band_outside_the_file_is_refused() {
        let tau = 5e-9;
        let f: Vec<f64> = (0..=600).map(|k| 4.9e9 + 2e6 * f64::from(k)).collect();
        // A 5 % echo 8 ns late: the echo's own group delay a·T·(a + cos ωT)/(1 + 2a cos ωT + a²)
        // swings between a·T/(1 + a) = +380.95 ps and −a·T/(1 − a) = −421.05 ps with a period of
        // 1/T = 125 MHz and averages zero over whole periods (closed form, computed).
        let s = line(&f, tau, 0.05, 8e-9);
        let b = band_delay(&f, &s, 5.10e9, 5.35e9).expect("in band");
        assert!((b.mean_s - tau).abs() < 0.5e-12, "two whole periods: {b:?}");
        let swing_ps = 380.952 + 421.053;
        assert!(
            ((b.max_s - b.min_s) * 1e12 - swing_ps).abs() < 0.01 * swing_ps,
            "{b:?}"
        );
        assert!(
            (b.u_ripple_s * 1e12 - swing_ps / 2.0 / 3f64.sqrt()).abs() < 2.5,
            "{b:?}"
        );
        assert!(band_delay(&f, &s, 4.8e9, 5.0e9).is_err());
    }
}
