//! Estimates with their 95 % intervals drawn as dots and whiskers, one row each, against
//! reference lines (a fleet mean, zero, a flagging threshold) and an optional band: the
//! stations of a cell, or the stations' offsets.

use super::svg_axis::{at, Axis, LEGEND_CHAR};
use crate::web::escape;

const W: f64 = 560.0;
const LEFT: f64 = 96.0;
const RIGHT: f64 = 28.0;
const TOP: f64 = 30.0;
const ROW: f64 = 30.0;
const BOTTOM: f64 = 50.0;

/// One row: an estimate and its interval.
#[derive(Debug, Clone, PartialEq)]
pub struct Estimate {
    /// Row label.
    pub label: String,
    /// The estimate.
    pub centre: f64,
    /// Half-width of its 95 % interval (NaN: no interval drawn).
    pub half_width: f64,
    /// Drawn in the warning colour.
    pub flagged: bool,
}

/// A line across every row at a value.
#[derive(Debug, Clone, PartialEq)]
pub struct Marker {
    /// The value.
    pub value: f64,
    /// Its legend text.
    pub name: String,
    /// Dashed (a limit) rather than solid (a centre).
    pub dashed: bool,
}

/// The plot of `rows`, with `markers` and an optional shaded `band`, its axis titled
/// `axis_label`; `caption` is the SVG's title.
pub fn intervals(
    rows: &[Estimate],
    markers: &[Marker],
    band: Option<(f64, f64, &str)>,
    axis_label: &str,
    caption: &str,
) -> String {
    let h = TOP + ROW * rows.len().max(1) as f64 + BOTTOM;
    let mut span = Vec::new();
    for r in rows {
        span.push(r.centre);
        if r.half_width.is_finite() {
            span.extend([r.centre - r.half_width, r.centre + r.half_width]);
        }
    }
    span.extend(markers.iter().map(|m| m.value));
    if let Some((lo, hi, _)) = band {
        span.extend([lo, hi]);
    }
    let x = Axis::covering(&span, 4, LEFT, W - RIGHT);
    let base = h - BOTTOM;
    let mut s = format!(
        "<svg class=\"plot\" viewBox=\"0 0 {W} {h}\" role=\"img\" aria-label=\"{c}\" \
         xmlns=\"http://www.w3.org/2000/svg\"><title>{c}</title>",
        c = escape(caption)
    );
    if let Some((lo, hi, _)) = band.filter(|b| b.0.is_finite() && b.1.is_finite()) {
        s += &format!(
            "<rect class=\"band\" x=\"{}\" y=\"{TOP}\" width=\"{}\" height=\"{}\"/>",
            at(x.px(lo)),
            at(x.px(hi) - x.px(lo)),
            at(base - TOP)
        );
    }
    for m in markers.iter().filter(|m| m.value.is_finite()) {
        s += &format!(
            "<line class=\"{}\" x1=\"{p}\" x2=\"{p}\" y1=\"{TOP}\" y2=\"{base}\"/>",
            if m.dashed { "limit" } else { "mean" },
            p = at(x.px(m.value))
        );
    }
    for (i, r) in rows.iter().enumerate() {
        let cy = TOP + ROW * (i as f64 + 0.5);
        let class = if r.flagged { "est flagged" } else { "est" };
        s += &format!(
            "<g class=\"{class}\"><text class=\"tick\" x=\"{}\" y=\"{}\" text-anchor=\"end\">{}</text>",
            at(LEFT - 8.0),
            at(cy + 4.0),
            escape(&r.label)
        );
        if r.half_width.is_finite() {
            let (a, b) = (x.px(r.centre - r.half_width), x.px(r.centre + r.half_width));
            s += &format!(
                "<line class=\"whisker\" x1=\"{}\" x2=\"{}\" y1=\"{c}\" y2=\"{c}\"/>\
                 <line class=\"whisker\" x1=\"{a}\" x2=\"{a}\" y1=\"{}\" y2=\"{}\"/>\
                 <line class=\"whisker\" x1=\"{b}\" x2=\"{b}\" y1=\"{}\" y2=\"{}\"/>",
                at(x.px(r.centre - r.half_width)),
                at(x.px(r.centre + r.half_width)),
                at(cy - 5.0),
                at(cy + 5.0),
                at(cy - 5.0),
                at(cy + 5.0),
                c = at(cy),
                a = at(a),
                b = at(b)
            );
        }
        s += &format!(
            "<circle class=\"dot\" cx=\"{}\" cy=\"{}\" r=\"4.5\"><title>{}: {:.1} ± {:.1}</title>\
             </circle></g>",
            at(x.px(r.centre)),
            at(cy),
            escape(&r.label),
            r.centre,
            r.half_width
        );
    }
    s += &x.drawn_below(base);
    s += &format!(
        "<text class=\"label\" x=\"{}\" y=\"{}\" text-anchor=\"middle\">{}</text>",
        at((LEFT + W - RIGHT) / 2.0),
        at(h - 6.0),
        escape(axis_label)
    );
    // Legend along the top: the band, then each marker.
    let mut lx = LEFT;
    if let Some((_, _, name)) = band {
        s += &format!(
            "<rect class=\"band\" x=\"{}\" y=\"8\" width=\"14\" height=\"12\"/>\
             <text class=\"key\" x=\"{}\" y=\"18\">{}</text>",
            at(lx),
            at(lx + 19.0),
            escape(name)
        );
        lx += 30.0 + LEGEND_CHAR * name.chars().count() as f64;
    }
    for m in markers.iter().filter(|m| !m.name.is_empty()) {
        s += &format!(
            "<line class=\"{}\" x1=\"{p}\" x2=\"{p}\" y1=\"8\" y2=\"20\"/>\
             <text class=\"key\" x=\"{}\" y=\"18\">{}</text>",
            if m.dashed { "limit" } else { "mean" },
            at(lx + 7.0),
            escape(&m.name),
            p = at(lx)
        );
        lx += 24.0 + LEGEND_CHAR * m.name.chars().count() as f64;
    }
    s + "</svg>"
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn each_row_gets_a_dot_and_its_whiskers_and_flagged_rows_are_marked() {
        let rows = [
            Estimate {
                label: "line-a".into(),
                centre: 1.0,
                half_width: 3.0,
                flagged: false,
            },
            Estimate {
                label: "line-d".into(),
                centre: 80.0,
                half_width: 9.0,
                flagged: true,
            },
        ];
        let svg = intervals(&rows, &[], None, "offset, ps", "offsets");
        assert_eq!(svg.matches("<circle").count(), 2);
        assert_eq!(svg.matches("class=\"whisker\"").count(), 6);
        assert_eq!(svg.matches("est flagged").count(), 1);
    }
}
