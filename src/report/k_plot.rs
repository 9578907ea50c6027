//! K per gain state with its 95 % interval, one series per channel.

use super::svg::{self, FONT, GRID, INK};
use super::{ReportData, ReportError};
use crate::fit::RowSource;
use plotters::prelude::*;
use std::collections::BTreeSet;

/// The plot, or `None` without a table.
pub fn svg(data: &ReportData) -> Result<Option<String>, ReportError> {
    let rows = &data.table;
    if rows.is_empty() {
        return Ok(None);
    }
    let channels: Vec<(u32, u32)> = rows
        .iter()
        .map(|r| (r.center_mhz, r.bw_mhz))
        .collect::<BTreeSet<_>>()
        .into_iter()
        .collect();
    let max_gain = rows.iter().map(|r| r.gain_index).max().unwrap_or(0);
    let Some((y0, y1)) = svg::padded(
        rows.iter()
            .flat_map(|r| [r.delay_ps - r.ci95_ps, r.delay_ps + r.ci95_ps]),
        0.15,
    ) else {
        return Ok(None);
    };
    svg::render("K per gain state", |root| {
        let mut chart = svg::chart(root, -0.5..f64::from(max_gain) + 0.5, y0..y1)?;
        svg::mesh(&mut chart, "DUT gain state", "K = TX + RX delay (ps)")
            .x_labels(max_gain as usize + 2)
            .x_label_formatter(&svg::whole)
            .y_label_formatter(&|y| format!("{y:.0}"))
            .draw()?;
        let width = channels.len() as f64;
        for (ci, ch) in channels.iter().enumerate() {
            // Channels side by side around each state, so their bars never hide each other.
            let offset = (ci as f64 - (width - 1.0) / 2.0) * 0.12;
            // A palette of the channels' own: the x axis is the gain state, so a state's
            // colour on a channel would read as that state.
            let colour = svg::channel_colour(ci);
            let mine: Vec<_> = rows
                .iter()
                .filter(|r| (r.center_mhz, r.bw_mhz) == *ch)
                .collect();
            for r in &mine {
                let x = f64::from(r.gain_index) + offset;
                let (lo, hi) = (r.delay_ps - r.ci95_ps, r.delay_ps + r.ci95_ps);
                chart.draw_series([
                    PathElement::new(vec![(x, lo), (x, hi)], colour.stroke_width(2)),
                    PathElement::new(vec![(x - 0.05, lo), (x + 0.05, lo)], colour.stroke_width(2)),
                    PathElement::new(vec![(x - 0.05, hi), (x + 0.05, hi)], colour.stroke_width(2)),
                ])?;
            }
            chart
                .draw_series(mine.iter().map(|r| {
                    let style = match r.source {
                        RowSource::Measured => colour.filled(),
                        // Half-tone: measured, but in states inferred from K, not reported.
                        RowSource::Inferred => colour.mix(0.45).filled(),
                        RowSource::Modelled => colour.stroke_width(2),
                        // Hollow half-tone: predicted from the population, not measured.
                        RowSource::Predicted => colour.mix(0.45).stroke_width(2),
                    };
                    Circle::new((f64::from(r.gain_index) + offset, r.delay_ps), 5, style)
                }))?
                .label(format!("{} MHz / {} MHz", ch.0, ch.1))
                .legend(move |(x, y)| Circle::new((x + 8, y), 5, colour.filled()));
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperLeft)
            .background_style(WHITE.mix(0.9))
            .border_style(GRID)
            .label_font((FONT, svg::LABEL_PX, &INK))
            .draw()?;
        Ok::<(), DrawingAreaErrorKind<std::io::Error>>(())
    })
    .map(Some)
}
