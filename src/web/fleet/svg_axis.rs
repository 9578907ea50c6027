//! A linear axis for the fleet's plots: the value range padded to round ticks, and the mapping
//! from ps to drawing units.

/// A value range drawn between two pixel positions.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Axis {
    /// Lowest value shown.
    pub lo: f64,
    /// Highest value shown.
    pub hi: f64,
    /// Where `lo` is drawn.
    pub px_lo: f64,
    /// Where `hi` is drawn.
    pub px_hi: f64,
    /// Distance between ticks.
    pub step: f64,
}

impl Axis {
    /// An axis holding every finite value of `values`, widened to round ticks about `ticks`
    /// apart in number, drawn from `px_lo` to `px_hi`. A single value gets a range around it.
    pub fn covering(values: &[f64], ticks: usize, px_lo: f64, px_hi: f64) -> Axis {
        let finite = values.iter().copied().filter(|v| v.is_finite());
        let (mut lo, mut hi) = finite.fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), v| {
            (a.min(v), b.max(v))
        });
        if lo > hi {
            (lo, hi) = (0.0, 1.0);
        }
        if hi - lo < 1e-9 {
            let pad = (lo.abs() * 0.01).max(1.0);
            (lo, hi) = (lo - pad, hi + pad);
        }
        let step = round_step((hi - lo) / ticks.max(1) as f64);
        Axis {
            lo: (lo / step).floor() * step,
            hi: (hi / step).ceil() * step,
            px_lo,
            px_hi,
            step,
        }
    }

    /// Where value `v` is drawn.
    pub fn px(&self, v: f64) -> f64 {
        self.px_lo + (v - self.lo) / (self.hi - self.lo) * (self.px_hi - self.px_lo)
    }

    /// The tick values, `lo` to `hi`.
    pub fn ticks(&self) -> Vec<f64> {
        let n = ((self.hi - self.lo) / self.step).round() as usize;
        (0..=n).map(|i| self.lo + i as f64 * self.step).collect()
    }

    /// The axis drawn level at height `base`, below a plot: its line from `px_lo` to `px_hi`,
    /// and each tick's mark and label.
    pub fn drawn_below(&self, base: f64) -> String {
        let mut s = format!(
            "<line class=\"axis\" x1=\"{}\" x2=\"{}\" y1=\"{base}\" y2=\"{base}\"/>",
            self.px_lo, self.px_hi
        );
        for t in self.ticks() {
            s += &format!(
                "<line class=\"axis\" x1=\"{p}\" x2=\"{p}\" y1=\"{base}\" y2=\"{}\"/>\
                 <text class=\"tick\" x=\"{p}\" y=\"{}\" text-anchor=\"middle\">{}</text>",
                base + 5.0,
                base + 22.0,
                self.label(t),
                p = at(self.px(t))
            );
        }
        s
    }

    /// A tick's label, with as many decimals as the step needs.
    pub fn label(&self, v: f64) -> String {
        let decimals = if self.step >= 1.0 {
            0
        } else {
            (-self.step.log10()).ceil() as usize
        };
        // -0 reads oddly on an axis.
        let v = if v.abs() < self.step * 1e-6 { 0.0 } else { v };
        format!("{v:.decimals$}")
    }
}

/// The round number (1, 2 or 5 times a power of ten) nearest above `raw`.
fn round_step(raw: f64) -> f64 {
    let p = 10f64.powf(raw.log10().floor());
    [1.0, 2.0, 5.0, 10.0]
        .into_iter()
        .map(|m| m * p)
        .find(|s| *s >= raw * 0.999)
        .unwrap_or(10.0 * p)
}

/// The width a legend gives each character of its text, in drawing units: room for the
/// largest text size the pages use (19 on a phone).
pub const LEGEND_CHAR: f64 = 10.5;

/// A number for an SVG attribute: two decimals are finer than any screen.
pub fn at(v: f64) -> String {
    format!("{v:.2}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ticks_are_round_and_cover_the_values() {
        let a = Axis::covering(&[2313.0, 2487.0], 5, 0.0, 100.0);
        assert_eq!(a.step, 50.0);
        assert_eq!(a.ticks(), [2300.0, 2350.0, 2400.0, 2450.0, 2500.0]);
        assert_eq!(a.px(2400.0), 50.0);
        assert_eq!(a.label(2350.0), "2350");
    }

    #[test]
    fn one_value_or_none_still_gives_an_axis() {
        let a = Axis::covering(&[7.0], 4, 0.0, 10.0);
        assert!(a.lo < 7.0 && a.hi > 7.0);
        let b = Axis::covering(&[f64::NAN], 4, 0.0, 10.0);
        assert!(b.hi > b.lo);
    }

    #[test]
    fn small_steps_get_decimals() {
        let a = Axis::covering(&[0.11, 0.19], 4, 0.0, 10.0);
        assert_eq!(a.step, 0.02);
        assert_eq!(a.label(0.14), "0.14");
    }
}
