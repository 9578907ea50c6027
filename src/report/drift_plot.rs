//! Plots over bench time: each burst's median K per gain state (drift), and the temperature
//! the bench reported with it.
//!
//! Bench time is each burst's `time_s` where the record has it (version 2): the bench clock,
//! settle waits and pauses included. Older records have only the reference's departure counter,
//! unwrapped; it runs only while exchanges do in a simulated bench, and a span longer than the
//! counter's 281 s wrap between two exchanges folds, so pauses look shorter than they were.

use super::{legend, svg};
use super::{BurstPoint, ReportData, ReportError};
use plotters::prelude::*;

/// Where a report's bench time comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum BenchTime {
    /// The rows' `time_s`, as the bench clock recorded it.
    Recorded,
    /// The reference's departure counter, unwrapped (records without `time_s`).
    Counter,
}

impl BenchTime {
    /// Where the time comes from, as the drift plot's caption says it.
    pub fn source(self) -> &'static str {
        match self {
            BenchTime::Recorded => "as the bench clock recorded it",
            BenchTime::Counter => {
                "from the reference's timestamps (a pause longer than the counter's 281 s wrap \
                 would fold)"
            }
        }
    }
}

/// Seconds, or minutes when the run is long enough to read better in them.
fn time_axis(points: &[BurstPoint]) -> (f64, &'static str) {
    let end = points.iter().map(|p| p.time_s).fold(0.0, f64::max);
    if end > 600.0 {
        (60.0, "bench time (min)")
    } else {
        (1.0, "bench time (s)")
    }
}

/// Each burst's median K against bench time, coloured by gain state; verification bursts
/// hollow. `None` without bursts.
pub fn drift_svg(data: &ReportData) -> Result<Option<String>, ReportError> {
    let pts = &data.bursts;
    let (scale, x_desc) = time_axis(pts);
    let (Some((x0, x1)), Some((y0, y1))) = (
        svg::padded(pts.iter().map(|p| p.time_s / scale), 0.02),
        svg::padded(pts.iter().map(|p| p.median_k_ps), 0.08),
    ) else {
        return Ok(None);
    };
    svg::render("drift", |root| {
        let states: std::collections::BTreeSet<u32> = pts.iter().map(|p| p.gain_index).collect();
        let mut entries: Vec<legend::Entry> = states
            .iter()
            .map(|&g| legend::Entry {
                marker: svg::state_colour(g).filled(),
                label: format!("gain state {g}"),
            })
            .collect();
        if pts.iter().any(|p| p.verify) {
            entries.push(legend::Entry {
                marker: svg::INK.stroke_width(1),
                label: "verification burst (hollow)".into(),
            });
        }
        // Points fill the whole plot: the legend goes above it, not over them.
        let area = legend::above(root, &entries)?;
        let mut chart = svg::chart(&area, x0..x1, y0..y1)?;
        svg::mesh(&mut chart, x_desc, "burst median K (ps)")
            .y_label_formatter(&|y| format!("{y:.0}"))
            .draw()?;
        chart.draw_series(pts.iter().map(|p| {
            let c = svg::state_colour(p.gain_index);
            let style = if p.verify {
                c.stroke_width(1)
            } else {
                c.filled()
            };
            Circle::new((p.time_s / scale, p.median_k_ps), 3, style)
        }))?;
        Ok::<(), DrawingAreaErrorKind<std::io::Error>>(())
    })
    .map(Some)
}

/// The temperature reported with each burst against bench time; `None` when the run reported
/// none.
pub fn temperature_svg(data: &ReportData) -> Result<Option<String>, ReportError> {
    let pts: Vec<(f64, f64)> = data
        .bursts
        .iter()
        .filter_map(|p| p.temp_c.map(|t| (p.time_s, t)))
        .collect();
    let (scale, x_desc) = time_axis(&data.bursts);
    let (Some((x0, x1)), Some((y0, y1))) = (
        svg::padded(pts.iter().map(|p| p.0 / scale), 0.02),
        svg::padded(pts.iter().map(|p| p.1), 0.1),
    ) else {
        return Ok(None);
    };
    svg::render("temperature", |root| {
        let mut chart = svg::chart(root, x0..x1, y0..y1)?;
        svg::mesh(&mut chart, x_desc, "temperature (°C)").draw()?;
        chart.draw_series(LineSeries::new(
            pts.iter().map(|(t, c)| (t / scale, *c)),
            svg::state_colour(4).stroke_width(2),
        ))?;
        Ok::<(), DrawingAreaErrorKind<std::io::Error>>(())
    })
    .map(Some)
}
