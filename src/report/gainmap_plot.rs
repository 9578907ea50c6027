//! The gain map: which gain state the DUT reported at each receive level over the whole run, and
//! each state's plateau from `gainmap.csv` where the run mapped one.

use super::svg;
use super::{ReportData, ReportError};
use plotters::prelude::*;

/// The plot, or `None` when no exchange reported a gain state.
pub fn svg(data: &ReportData) -> Result<Option<String>, ReportError> {
    let levels = &data.levels;
    let Some((x0, x1)) = svg::padded(
        levels.iter().map(|l| l.rx_dbm).chain(
            data.gainmap
                .iter()
                .flat_map(|g| [g.rx_power_min_dbm, g.rx_power_max_dbm]),
        ),
        0.03,
    ) else {
        return Ok(None);
    };
    let max_gain = levels
        .iter()
        .flat_map(|l| l.counts.keys().copied())
        .chain(data.gainmap.iter().map(|g| g.gain_index))
        .max()
        .unwrap_or(0);
    svg::render("gain map", |root| {
        let mut chart = svg::chart(root, x0..x1, -0.5..f64::from(max_gain) + 0.5)?;
        svg::mesh(&mut chart, "DUT receive level (dBm)", "reported gain state")
            .y_labels(max_gain as usize + 2)
            .y_label_formatter(&svg::whole)
            .draw()?;
        chart.draw_series(data.gainmap.iter().map(|g| {
            let y = f64::from(g.gain_index);
            Rectangle::new(
                [
                    (g.rx_power_min_dbm, y - 0.18),
                    (g.rx_power_max_dbm, y + 0.18),
                ],
                svg::state_colour(g.gain_index).mix(0.18).filled(),
            )
        }))?;
        for l in levels {
            let total: u64 = l.counts.values().sum();
            chart.draw_series(l.counts.iter().map(|(g, n)| {
                // The dot's size is the share of the level's exchanges in that state, so the
                // levels where the AGC hesitates between two states show two smaller dots.
                let share = *n as f64 / total.max(1) as f64;
                let r = (2.0 + 4.0 * share).round() as i32;
                Circle::new((l.rx_dbm, f64::from(*g)), r, svg::state_colour(*g).filled())
            }))?;
        }
        Ok::<(), DrawingAreaErrorKind<std::io::Error>>(())
    })
    .map(Some)
}
