//! Range error against receive level after verification: the single-state calibration against
//! the per-gain table, per channel.

use super::svg::{self, FONT, GRID, INK};
use super::{ReportData, ReportError};
use plotters::prelude::*;
use std::collections::BTreeSet;

/// Colour of the single-state calibration's curve.
const SINGLE: RGBColor = RGBColor(0xb8, 0x3b, 0x3b);
/// Colour of the per-gain table's curve.
const TABLE: RGBColor = RGBColor(0x1f, 0x5f, 0x8b);

/// The plot, or `None` without verification rows.
pub fn svg(data: &ReportData) -> Result<Option<String>, ReportError> {
    let rows = &data.verify;
    let (Some((x0, x1)), Some((y0, y1))) = (
        svg::padded(rows.iter().map(|r| r.rx_power_dbm), 0.03),
        svg::padded(
            rows.iter()
                .flat_map(|r| [r.range_error_single_m, r.range_error_table_m, 0.0]),
            0.1,
        ),
    ) else {
        return Ok(None);
    };
    let channels: BTreeSet<(u32, u32)> = rows.iter().map(|r| (r.center_mhz, r.bw_mhz)).collect();
    svg::render("range error", |root| {
        let mut chart = svg::chart(root, x0..x1, y0..y1)?;
        svg::mesh(
            &mut chart,
            "DUT receive level (dBm)",
            "median range error (m)",
        )
        .draw()?;
        chart.draw_series(LineSeries::new([(x0, 0.0), (x1, 0.0)], INK.mix(0.5)))?;
        for ch in &channels {
            let mut mine: Vec<_> = rows
                .iter()
                .filter(|r| (r.center_mhz, r.bw_mhz) == *ch)
                .collect();
            mine.sort_by(|a, b| a.rx_power_dbm.total_cmp(&b.rx_power_dbm));
            let suffix = if channels.len() > 1 {
                format!(" ({} MHz / {} MHz)", ch.0, ch.1)
            } else {
                String::new()
            };
            for (name, colour, pick) in [
                ("single-state calibration", SINGLE, 0),
                ("per-gain table", TABLE, 1),
            ] {
                let pts: Vec<(f64, f64)> = mine
                    .iter()
                    .map(|r| {
                        let y = if pick == 0 {
                            r.range_error_single_m
                        } else {
                            r.range_error_table_m
                        };
                        (r.rx_power_dbm, y)
                    })
                    .collect();
                chart
                    .draw_series(LineSeries::new(pts.clone(), colour.stroke_width(2)))?
                    .label(format!("{name}{suffix}"))
                    .legend(move |(x, y)| {
                        PathElement::new(vec![(x, y), (x + 18, y)], colour.stroke_width(2))
                    });
                chart.draw_series(pts.iter().map(|p| Circle::new(*p, 3, colour.filled())))?;
            }
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .background_style(WHITE.mix(0.9))
            .border_style(GRID)
            .label_font((FONT, svg::LABEL_PX, &INK))
            .draw()?;
        Ok::<(), DrawingAreaErrorKind<std::io::Error>>(())
    })
    .map(Some)
}
