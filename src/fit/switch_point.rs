//! Where an AGC switches between two neighbouring gain states, estimated without the bias that
//! level noise gives the first crossing.
//!
//! A sticky AGC leaves its state on one noisy level measurement. Near a switch point it toggles,
//! so where the state is first seen to change (or where half of a point's exchanges report the
//! new state) moves toward the middle of the hysteresis band by an amount that depends on the
//! noise and on how many exchanges each point takes. What does not move is the chance that one
//! exchange switches, given the state it starts in: with Gaussian level noise of σ it is
//! `Φ((a − a_up)/σ)` to switch up from the lower-gain state at attenuation `a`, and
//! `Φ((a_down − a)/σ)` to switch back. Both are probit models (common practice for a threshold
//! seen through Gaussian noise); their 50 % points `a_up` and `a_down` are the switch points the
//! AGC would show without noise, and `a_up − a_down` is the hysteresis.
//!
//! The data are, per attenuation, the exchanges that started in each state (the previous
//! exchange's state) and how many of them switched. A sweep sees each switch only a few times,
//! too few to fit σ as well, so σ comes from the spread of the levels the device reports at
//! each point (assumed to be the measurement its AGC decides on, as a receiver's RSSI usually
//! is). Each direction is then a one-parameter probit fit by maximum likelihood (Newton's
//! method; the log-likelihood is concave in the location), its interval the Wald interval from
//! the observed information; the directions are independent given σ, so the hysteresis'
//! variance is the sum of theirs. Where no level noise is seen and the data separate perfectly
//! (every exchange below some attenuation stayed, every one above switched), a switch point is
//! only known to lie between the last stay and the first switch, and that bracket is the
//! interval.

use statrs::function::erf::erfc;

/// Exchanges that started in one state at one attenuation, and how many of them switched.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Trials {
    /// Attenuator setting.
    pub atten_db: f64,
    /// Exchanges that started in the state.
    pub n: u64,
    /// Of those, how many left it.
    pub switched: u64,
}

/// An estimate with a symmetric two-sided 95 % interval.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Estimate {
    /// Best estimate.
    pub value_db: f64,
    /// Half-width of its 95 % interval.
    pub ci95_db: f64,
}

impl Estimate {
    /// Lower end of the interval.
    pub fn low_db(&self) -> f64 {
        self.value_db - self.ci95_db
    }

    /// Upper end of the interval.
    pub fn high_db(&self) -> f64 {
        self.value_db + self.ci95_db
    }
}

/// How the switch points were found.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Method {
    /// Probit fit of the per-exchange switch chance; Wald intervals.
    Probit,
    /// The data separate perfectly (no level noise seen); the intervals are the brackets
    /// between the last exchange that stayed and the first that switched.
    Bracket,
}

/// The switch points of one pair of neighbouring states.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SwitchFit {
    /// Attenuation at which an exchange is as likely as not to switch to the higher-gain state
    /// (attenuation rising), when any exchange did.
    pub up_db: Option<Estimate>,
    /// Attenuation at which an exchange is as likely as not to switch back (attenuation
    /// falling), when any exchange did.
    pub down_db: Option<Estimate>,
    /// Level noise seen behind the switching, 1 sigma, in dB of attenuation (probit fits only).
    pub noise_db: Option<f64>,
    /// `up_db − down_db` with its interval, when both directions were seen to switch.
    pub hysteresis_db: Option<Estimate>,
    /// How the estimates were made.
    pub method: Method,
}

impl SwitchFit {
    /// The hysteresis when its interval lies wholly above zero; otherwise the data cannot tell
    /// it from none (or from a negative, impossible, value) and there is nothing to state.
    pub fn resolved_hysteresis_db(&self) -> Option<Estimate> {
        self.hysteresis_db.filter(|h| h.low_db() > 0.0)
    }
}

/// Two-sided 95 % normal quantile.
const Z975: f64 = 1.959_963_984_540_054;

/// Fits the switch points from exchanges that started in the lower-gain state (`up`: a switch is
/// a step to higher gain) and in the higher-gain state (`down`), given the level noise behind
/// the AGC's decisions (`noise_db`, 1 sigma, from the spread of the reported levels; `None` when
/// the device reports none). `None` when neither direction ever switched, or when switching is
/// noisy but the noise is unknown.
pub fn fit_switch(up: &[Trials], down: &[Trials], noise_db: Option<f64>) -> Option<SwitchFit> {
    let up: Vec<Trials> = up.iter().copied().filter(|t| t.n > 0).collect();
    let down: Vec<Trials> = down.iter().copied().filter(|t| t.n > 0).collect();
    let switched = |ts: &[Trials]| ts.iter().any(|t| t.switched > 0);
    if !switched(&up) && !switched(&down) {
        return None;
    }
    let separated = [(&up, Side::Up), (&down, Side::Down)]
        .iter()
        .all(|(ts, side)| !switched(ts) || bracket(ts, *side).is_some());
    match noise_db {
        Some(sigma) if sigma > NOISELESS_DB => {
            let up_db = locate(&up, Side::Up, sigma);
            let down_db = locate(&down, Side::Down, sigma);
            // Given σ, the two directions' data are independent: their variances add.
            let hysteresis_db = up_db.zip(down_db).map(|(u, d)| Estimate {
                value_db: u.value_db - d.value_db,
                ci95_db: u.ci95_db.hypot(d.ci95_db),
            });
            Some(SwitchFit {
                up_db,
                down_db,
                noise_db: Some(sigma),
                hysteresis_db,
                method: Method::Probit,
            })
        }
        _ if separated => {
            let up_db = bracket(&up, Side::Up);
            let down_db = bracket(&down, Side::Down);
            Some(SwitchFit {
                up_db,
                down_db,
                noise_db: None,
                hysteresis_db: bracket_difference(up_db, down_db),
                method: Method::Bracket,
            })
        }
        _ => None,
    }
}

/// Level noise below which switching is taken as noiseless (a hundredth of a dB: far below any
/// attenuator's step).
const NOISELESS_DB: f64 = 0.01;

#[derive(Clone, Copy, PartialEq)]
enum Side {
    Up,
    Down,
}

/// The interval a perfectly separated direction leaves, as an estimate (its midpoint, half its
/// width); `None` when the direction is not separated or one end is not bounded by data.
fn bracket(ts: &[Trials], side: Side) -> Option<Estimate> {
    // Map attenuation so that switching becomes likelier as `x` grows, whichever the side.
    let sign = if side == Side::Up { 1.0 } else { -1.0 };
    let stayed_max = ts
        .iter()
        .filter(|t| t.switched < t.n)
        .map(|t| sign * t.atten_db)
        .fold(f64::NEG_INFINITY, f64::max);
    let switched_min = ts
        .iter()
        .filter(|t| t.switched > 0)
        .map(|t| sign * t.atten_db)
        .fold(f64::INFINITY, f64::min);
    (stayed_max.is_finite() && switched_min.is_finite() && stayed_max < switched_min).then(|| {
        Estimate {
            value_db: sign * (stayed_max + switched_min) / 2.0,
            ci95_db: (switched_min - stayed_max) / 2.0,
        }
    })
}

/// `a − b` for two brackets: every value in one against every value in the other, so the
/// half-widths add.
fn bracket_difference(a: Option<Estimate>, b: Option<Estimate>) -> Option<Estimate> {
    let (a, b) = (a?, b?);
    Some(Estimate {
        value_db: a.value_db - b.value_db,
        ci95_db: a.ci95_db + b.ci95_db,
    })
}

/// Maximum-likelihood probit location with a known slope: the attenuation `a` at which the
/// switch chance `Φ(sign·(x − a)/σ)` is one half, with its Wald interval from the observed
/// information. `None` unless the direction has both an exchange that switched and one that
/// stayed (otherwise the likelihood has no maximum).
fn locate(ts: &[Trials], side: Side, noise_db: f64) -> Option<Estimate> {
    let any = |f: &dyn Fn(&Trials) -> bool| ts.iter().any(f);
    if !any(&|t| t.switched > 0) || !any(&|t| t.switched < t.n) {
        return None;
    }
    let sign = if side == Side::Up { 1.0 } else { -1.0 };
    // η = sign·(x − a)/σ; in u = sign·x/σ and c = sign·a/σ, η = u − c: a shift, concave in c.
    let rows: Vec<(f64, f64, f64)> = ts
        .iter()
        .map(|t| (sign * t.atten_db / noise_db, t.n as f64, t.switched as f64))
        .collect();
    let ll = |c: f64| -> f64 {
        rows.iter()
            .map(|&(u, n, k)| {
                let e = u - c;
                let a = if k > 0.0 { k * ln_cdf(e) } else { 0.0 };
                let b = if n > k { (n - k) * ln_cdf(-e) } else { 0.0 };
                a + b
            })
            .sum()
    };
    // d/dc and −d²/dc² of the log-likelihood (λ′(η) = −λ(η)(η + λ(η))).
    let derivatives = |c: f64| -> (f64, f64) {
        rows.iter().fold((0.0, 0.0), |(g, h), &(u, n, k)| {
            let e = u - c;
            let (lp, lm) = (mills(e), mills(-e));
            let score = -(k * lp - (n - k) * lm);
            let info = k * lp * (e + lp) + (n - k) * lm * (lm - e);
            (g + score, h + info)
        })
    };
    // Start where half of all exchanges at risk would have switched had they all been at the
    // weighted mean: the mean of the switches' positions.
    let (sw, su) = rows
        .iter()
        .fold((0.0, 0.0), |(w, s), &(u, _, k)| (w + k, s + k * u));
    let mut c = su / sw;
    let mut value = ll(c);
    for _ in 0..200 {
        let (g, h) = derivatives(c);
        if !(h > 0.0 && g.is_finite()) {
            return None;
        }
        let mut step = g / h;
        let mut moved = false;
        for _ in 0..60 {
            let v = ll(c + step);
            if v.is_finite() && v >= value {
                c += step;
                value = v;
                moved = true;
                break;
            }
            step /= 2.0;
        }
        if !moved || step.abs() < 1e-12 {
            break;
        }
    }
    let (_, info) = derivatives(c);
    (info > 0.0 && c.is_finite()).then(|| Estimate {
        value_db: sign * c * noise_db,
        ci95_db: Z975 * noise_db / info.sqrt(),
    })
}

/// ln Φ(z), accurate far into the lower tail.
fn ln_cdf(z: f64) -> f64 {
    if z < -30.0 {
        // Φ(z) ≈ φ(z)/(−z)·(1 − 1/z² + 3/z⁴) (the asymptotic series; Abramowitz & Stegun 26.2.12,
        // from memory).
        let z2 = z * z;
        -z2 / 2.0 - (-z).ln() - 0.5 * (2.0 * std::f64::consts::PI).ln()
            + (1.0 - 1.0 / z2 + 3.0 / (z2 * z2)).ln()
    } else if z > 0.0 {
        (-0.5 * erfc(z / std::f64::consts::SQRT_2)).ln_1p()
    } else {
        (0.5 * erfc(-z / std::f64::consts::SQRT_2)).ln()
    }
}

/// The inverse Mills ratio φ(z)/Φ(z).
fn mills(z: f64) -> f64 {
    if z < -30.0 {
        let z2 = z * z;
        -z / (1.0 - 1.0 / z2 + 3.0 / (z2 * z2))
    } else {
        let pdf = (-z * z / 2.0).exp() / (2.0 * std::f64::consts::PI).sqrt();
        pdf / (0.5 * erfc(-z / std::f64::consts::SQRT_2))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use statrs::distribution::{ContinuousCDF, Normal};

    /// Trials whose switch counts are the model's expectation, rounded: from the definition,
    /// a fit must give back the switch points and the noise it was built from.
    fn expected(up_db: f64, down_db: f64, noise_db: f64, n: u64) -> (Vec<Trials>, Vec<Trials>) {
        let phi = Normal::standard();
        let at = |a: f64, z: f64| Trials {
            atten_db: a,
            n,
            switched: (n as f64 * phi.cdf(z)).round() as u64,
        };
        let levels: Vec<f64> = (0..=24).map(|i| 20.0 + 0.5 * f64::from(i)).collect();
        let up = levels
            .iter()
            .map(|&a| at(a, (a - up_db) / noise_db))
            .collect();
        let down = levels
            .iter()
            .map(|&a| at(a, (down_db - a) / noise_db))
            .collect();
        (up, down)
    }

    #[test]
    fn the_fit_recovers_the_switch_points_it_was_built_from() {
        let (up, down) = expected(31.0, 28.0, 1.2, 1_000_000);
        let fit = fit_switch(&up, &down, Some(1.2)).expect("fits");
        assert_eq!(fit.method, Method::Probit);
        let (u, d, h) = (
            fit.up_db.expect("up"),
            fit.down_db.expect("down"),
            fit.hysteresis_db.expect("hysteresis"),
        );
        assert!((u.value_db - 31.0).abs() < 1e-3, "{u:?}");
        assert!((d.value_db - 28.0).abs() < 1e-3, "{d:?}");
        assert!((h.value_db - 3.0).abs() < 2e-3, "{h:?}");
        // A million exchanges per point: a few thousandths of a dB.
        assert!(u.ci95_db > 0.0 && u.ci95_db < 0.01, "{u:?}");
        assert_eq!(fit.resolved_hysteresis_db(), Some(h));
    }

    #[test]
    fn fewer_exchanges_widen_the_interval_as_the_square_root() {
        // Information grows with n, so the half-width shrinks as 1/√n: 100× the exchanges,
        // a tenth of the width (to the rounding of the counts).
        let width = |n| {
            let (up, down) = expected(31.0, 28.0, 1.2, n);
            fit_switch(&up, &down, Some(1.2))
                .expect("fits")
                .hysteresis_db
                .expect("h")
                .ci95_db
        };
        let ratio = width(10_000) / width(1_000_000);
        assert!((ratio - 10.0).abs() < 0.2, "{ratio}");
    }

    #[test]
    fn an_interval_reaching_zero_states_no_hysteresis() {
        // Switch points 0.2 dB apart seen through 1.5 dB of noise with 40 exchanges per point:
        // the interval spans zero, so nothing is stated, whatever sign the estimate has.
        let (up, down) = expected(30.1, 29.9, 1.5, 40);
        let fit = fit_switch(&up, &down, Some(1.5)).expect("fits");
        let h = fit.hysteresis_db.expect("estimated");
        assert!(h.low_db() <= 0.0, "{h:?}");
        assert_eq!(fit.resolved_hysteresis_db(), None);
    }

    #[test]
    fn one_direction_alone_is_fitted_and_none_gives_nothing() {
        let (up, _) = expected(31.0, 28.0, 1.2, 1_000_000);
        let fit = fit_switch(&up, &[], Some(1.2)).expect("fits");
        assert!((fit.up_db.expect("up").value_db - 31.0).abs() < 1e-3);
        assert_eq!((fit.down_db, fit.hysteresis_db), (None, None));
        let never = [Trials {
            atten_db: 30.0,
            n: 50,
            switched: 0,
        }];
        assert_eq!(fit_switch(&never, &never, Some(1.2)), None);
        // Noisy switching (a stay beside a switch at one attenuation) with the noise unknown.
        let mixed = [Trials {
            atten_db: 30.0,
            n: 50,
            switched: 10,
        }];
        assert_eq!(fit_switch(&mixed, &[], None), None);
    }

    #[test]
    fn far_tails_stay_finite() {
        // Points 40 σ from the switch: lnΦ and the Mills ratio must not overflow or give NaN.
        for z in [-60.0, -35.0, -30.0, -29.9, 0.0, 8.0, 40.0] {
            assert!(ln_cdf(z).is_finite() && ln_cdf(z) <= 0.0, "{z}");
            assert!(mills(z).is_finite() && mills(z) >= 0.0, "{z}");
        }
        // Either side of the switch to the asymptotic series, lnΦ is continuous.
        assert!((ln_cdf(-30.0 - 1e-9) - ln_cdf(-30.0 + 1e-9)).abs() < 1e-6);
        assert!((mills(-30.0 - 1e-9) - mills(-30.0 + 1e-9)).abs() < 1e-6);
    }
}
