//! The spread of each table cell: a box per cell of every exchange's K (verification excluded).
//!
//! Box and whiskers after Tukey (common practice): the box spans the quartiles, the line is the
//! median, whiskers reach the furthest exchange within 1.5 interquartile ranges, and exchanges
//! beyond are drawn one by one — late detections show there.

use super::svg;
use super::{CellSpread, ReportData, ReportError};
use plotters::prelude::*;

/// Quartiles by linear interpolation between order statistics.
fn quantile(sorted: &[f64], q: f64) -> f64 {
    let pos = q * (sorted.len() - 1) as f64;
    let (i, frac) = (pos.floor() as usize, pos.fract());
    match sorted.get(i + 1) {
        Some(next) => sorted[i] + frac * (next - sorted[i]),
        None => sorted[i],
    }
}

/// A cell's box: quartiles, whisker ends and the exchanges beyond them.
struct Boxed {
    q1: f64,
    q2: f64,
    q3: f64,
    low: f64,
    high: f64,
    beyond: Vec<f64>,
}

fn boxed(cell: &CellSpread) -> Option<Boxed> {
    let mut v: Vec<f64> = cell
        .k_ps
        .iter()
        .copied()
        .filter(|k| k.is_finite())
        .collect();
    if v.is_empty() {
        return None;
    }
    v.sort_by(f64::total_cmp);
    let (q1, q2, q3) = (quantile(&v, 0.25), quantile(&v, 0.5), quantile(&v, 0.75));
    let (lo_fence, hi_fence) = (q1 - 1.5 * (q3 - q1), q3 + 1.5 * (q3 - q1));
    let inside = || {
        v.iter()
            .copied()
            .filter(|k| (lo_fence..=hi_fence).contains(k))
    };
    Some(Boxed {
        q1,
        q2,
        q3,
        low: inside().fold(q1, f64::min),
        high: inside().fold(q3, f64::max),
        beyond: v
            .iter()
            .copied()
            .filter(|k| !(lo_fence..=hi_fence).contains(k))
            .collect(),
    })
}

/// The plot, or `None` without cells.
pub fn svg(data: &ReportData) -> Result<Option<String>, ReportError> {
    let boxes: Vec<(&CellSpread, Boxed)> = data
        .cells
        .iter()
        .filter_map(|c| boxed(c).map(|b| (c, b)))
        .collect();
    // The axis spans the whiskers: late detections can lie microseconds away and would shrink
    // every box to a line, so exchanges beyond the axis are pinned to its edge as triangles.
    let Some((y0, y1)) = svg::padded(boxes.iter().flat_map(|(_, b)| [b.low, b.high]), 0.25) else {
        return Ok(None);
    };
    let several_channels = boxes
        .windows(2)
        .any(|w| (w[0].0.center_mhz, w[0].0.bw_mhz) != (w[1].0.center_mhz, w[1].0.bw_mhz));
    let labels: Vec<String> = boxes
        .iter()
        .map(|(c, _)| {
            if several_channels {
                format!("{}/{} g{}", c.center_mhz, c.bw_mhz, c.gain_index)
            } else {
                format!("gain {}", c.gain_index)
            }
        })
        .collect();
    let n = boxes.len();
    svg::render("cell spread", |root| {
        let mut chart = svg::chart(root, -0.5..n as f64 - 0.5, y0..y1)?;
        let label = |x: &f64| {
            let i = x.round();
            if (x - i).abs() < 1e-6 && i >= 0.0 {
                labels.get(i as usize).cloned().unwrap_or_default()
            } else {
                String::new()
            }
        };
        svg::mesh(&mut chart, "table cell", "K of each exchange (ps)")
            .x_labels(n + 1)
            .x_label_formatter(&label)
            .y_label_formatter(&|y| format!("{y:.0}"))
            .draw()?;
        for (i, (cell, b)) in boxes.iter().enumerate() {
            let x = i as f64;
            let colour = svg::state_colour(cell.gain_index);
            let w = 0.22;
            chart.draw_series([
                Rectangle::new([(x - w, b.q1), (x + w, b.q3)], colour.mix(0.25).filled()),
                Rectangle::new([(x - w, b.q1), (x + w, b.q3)], colour.stroke_width(2)),
            ])?;
            chart.draw_series([
                PathElement::new(vec![(x - w, b.q2), (x + w, b.q2)], colour.stroke_width(3)),
                PathElement::new(vec![(x, b.q3), (x, b.high)], colour.stroke_width(1)),
                PathElement::new(vec![(x, b.q1), (x, b.low)], colour.stroke_width(1)),
                PathElement::new(
                    vec![(x - w / 2.0, b.high), (x + w / 2.0, b.high)],
                    colour.stroke_width(1),
                ),
                PathElement::new(
                    vec![(x - w / 2.0, b.low), (x + w / 2.0, b.low)],
                    colour.stroke_width(1),
                ),
            ])?;
            chart.draw_series(
                b.beyond
                    .iter()
                    .filter(|k| (y0..=y1).contains(*k))
                    .map(|k| Cross::new((x, *k), 3, colour.stroke_width(1))),
            )?;
            chart.draw_series(
                b.beyond
                    .iter()
                    .filter(|k| !(y0..=y1).contains(*k))
                    .map(|k| TriangleMarker::new((x, k.clamp(y0, y1)), 4, colour.filled())),
            )?;
        }
        Ok::<(), DrawingAreaErrorKind<std::io::Error>>(())
    })
    .map(Some)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quartiles_interpolate_between_order_statistics() {
        // Hyndman & Fan (1996) definition 7 (R's default): 1..=5 has quartiles 2 and 4;
        // 1..=4 has 1.75 and 3.25.
        let five = [1.0, 2.0, 3.0, 4.0, 5.0];
        assert_eq!((quantile(&five, 0.25), quantile(&five, 0.75)), (2.0, 4.0));
        let four = [1.0, 2.0, 3.0, 4.0];
        assert_eq!((quantile(&four, 0.25), quantile(&four, 0.75)), (1.75, 3.25));
    }

    #[test]
    fn far_exchanges_fall_beyond_the_whiskers() {
        let mut k_ps: Vec<f64> = (0..20).map(|i| 1000.0 + f64::from(i)).collect();
        k_ps.push(5000.0);
        let cell = CellSpread {
            center_mhz: 5180,
            bw_mhz: 80,
            gain_index: 0,
            k_ps,
        };
        let b = boxed(&cell).expect("box");
        assert_eq!(b.beyond, vec![5000.0]);
        assert_eq!(b.high, 1019.0);
        assert_eq!(b.low, 1000.0);
    }
}
