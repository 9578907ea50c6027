//! A cell's population drawn server-side as a self-contained SVG: the units' K in bins, with
//! the fleet's tolerance interval as a band and the mean as a line.

use super::svg_axis::{at, Axis, LEGEND_CHAR};
use crate::web::escape;

/// Drawing size (the SVG scales to its card; text is sized for this width).
const W: f64 = 560.0;
const H: f64 = 250.0;
const LEFT: f64 = 44.0;
const RIGHT: f64 = 28.0;
const TOP: f64 = 34.0;
const BOTTOM: f64 = 50.0;

/// The bins of `values`: Sturges' rule (1 + log₂ n bins, at least 5) over the values' range;
/// (left edge, width, count).
pub fn bins(values: &[f64]) -> Vec<(f64, f64, usize)> {
    let v: Vec<f64> = values.iter().copied().filter(|v| v.is_finite()).collect();
    if v.is_empty() {
        return Vec::new();
    }
    let lo = v.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = v.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let k = ((v.len() as f64).log2().ceil() as usize + 1).clamp(5, 40);
    let width = if hi > lo { (hi - lo) / k as f64 } else { 1.0 };
    let mut counts = vec![0usize; k];
    for x in &v {
        let i = (((x - lo) / width).floor() as usize).min(k - 1);
        counts[i] += 1;
    }
    counts
        .into_iter()
        .enumerate()
        .map(|(i, c)| (lo + i as f64 * width, width, c))
        .collect()
}

/// The histogram of `values` (ps) with the tolerance interval `tol` and `mean` marked;
/// `caption` names what is drawn, for readers of the SVG's title.
pub fn histogram(values: &[f64], tol: (f64, f64), mean: f64, caption: &str) -> String {
    let bins = bins(values);
    let mut span: Vec<f64> = values.to_vec();
    span.extend([tol.0, tol.1, mean]);
    let x = Axis::covering(&span, 4, LEFT, W - RIGHT);
    let top = bins.iter().map(|b| b.2).max().unwrap_or(1).max(1) as f64;
    let y = Axis::covering(&[0.0, top], 4, H - BOTTOM, TOP);
    let mut s = format!(
        "<svg class=\"plot\" viewBox=\"0 0 {W} {H}\" role=\"img\" aria-label=\"{c}\" \
         xmlns=\"http://www.w3.org/2000/svg\"><title>{c}</title>",
        c = escape(caption)
    );
    if tol.0.is_finite() && tol.1.is_finite() {
        s += &format!(
            "<rect class=\"band\" x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"/>",
            at(x.px(tol.0)),
            at(TOP),
            at(x.px(tol.1) - x.px(tol.0)),
            at(H - BOTTOM - TOP)
        );
    }
    for t in y.ticks() {
        s += &format!(
            "<line class=\"grid\" x1=\"{LEFT}\" x2=\"{}\" y1=\"{p}\" y2=\"{p}\"/>\
             <text class=\"tick\" x=\"{}\" y=\"{}\" text-anchor=\"end\">{}</text>",
            W - RIGHT,
            at(LEFT - 6.0),
            at(y.px(t) + 4.0),
            y.label(t),
            p = at(y.px(t))
        );
    }
    for (left, width, count) in &bins {
        let (x0, x1) = (x.px(*left), x.px(left + width));
        s += &format!(
            "<rect class=\"bar\" x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\"><title>{} units \
             from {:.1} to {:.1} ps</title></rect>",
            at(x0 + 0.5),
            at(y.px(*count as f64)),
            at((x1 - x0 - 1.0).max(0.5)),
            at(y.px(0.0) - y.px(*count as f64)),
            count,
            left,
            left + width
        );
    }
    if mean.is_finite() {
        s += &format!(
            "<line class=\"mean\" x1=\"{p}\" x2=\"{p}\" y1=\"{}\" y2=\"{}\"/>",
            at(TOP),
            at(H - BOTTOM),
            p = at(x.px(mean))
        );
    }
    let base = H - BOTTOM;
    s += &x.drawn_below(base);
    s += &format!(
        "<text class=\"label\" x=\"{}\" y=\"{}\" text-anchor=\"middle\">K, ps</text>\
         <text class=\"label\" x=\"{LEFT}\" y=\"14\">units</text>",
        at((LEFT + W - RIGHT) / 2.0),
        H - 6.0
    );
    // The legend, top right: what the band and the line are.
    let (band, line) = ("tolerance interval", "mean");
    let line_x = W - RIGHT - 7.0 - LEGEND_CHAR * line.len() as f64;
    let lx = line_x - 24.0 - 19.0 - LEGEND_CHAR * band.len() as f64;
    s += &format!(
        "<rect class=\"band\" x=\"{}\" y=\"8\" width=\"14\" height=\"12\"/>\
         <text class=\"key\" x=\"{}\" y=\"18\">{band}</text>\
         <line class=\"mean\" x1=\"{l}\" x2=\"{l}\" y1=\"8\" y2=\"20\"/>\
         <text class=\"key\" x=\"{}\" y=\"18\">{line}</text></svg>",
        at(lx),
        at(lx + 19.0),
        at(line_x + 7.0),
        l = at(line_x)
    );
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_value_is_in_one_bin() {
        let v: Vec<f64> = (0..100).map(|i| 2000.0 + f64::from(i) * 1.7).collect();
        let b = bins(&v);
        // Sturges: 1 + ⌈log₂ 100⌉ = 8 bins.
        assert_eq!(b.len(), 8);
        assert_eq!(b.iter().map(|b| b.2).sum::<usize>(), 100);
        assert_eq!(b[0].0, 2000.0);
    }

    #[test]
    fn the_band_spans_the_interval_and_text_is_escaped() {
        let svg = histogram(&[10.0, 20.0, 30.0], (0.0, 40.0), 20.0, "cell <a>");
        assert!(svg.contains("class=\"band\""));
        assert!(svg.contains("cell &lt;a&gt;"));
        assert!(!svg.contains("<a>"));
    }
}
