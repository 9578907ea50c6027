//! A legend drawn in a strip above a plot rather than over it: a plot whose points fill its
//! whole area (the drift plot) has no corner a legend could cover without hiding data.

use super::svg;
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// One entry: its marker's style (filled or hollow, in the series' colour) and its text.
pub struct Entry {
    /// The marker's style.
    pub marker: ShapeStyle,
    /// What it stands for.
    pub label: String,
}

/// Height of one row of entries, px.
const ROW_PX: i32 = 28;
/// The first entry's left edge: the plot area's, past the chart's margin and y label area.
const LEFT_PX: i32 = 88;
/// Space for the marker before the text, and between entries, px.
const MARKER_PX: i32 = 20;
const GAP_PX: i32 = 24;
/// A character's width taken for layout, in ems.
const CHAR_EM: f64 = 0.5;

/// Each entry's left edge and row, rows filled left to right within the plot's width. Text
/// width is taken as half the font size a character (plotters writes a label's size as about
/// 0.81 of the size given: see [`svg::LABEL_PX`]): above the 0.42 measured on this legend's
/// text in the test browser's sans-serif face, so entries do not overlap.
fn layout(entries: &[Entry]) -> Vec<(i32, i32)> {
    let char_px = CHAR_EM * f64::from(svg::LABEL_PX) * 0.81;
    let right = svg::WIDTH as i32 - 16;
    let (mut x, mut row) = (LEFT_PX, 0);
    entries
        .iter()
        .map(|e| {
            let w = MARKER_PX + (e.label.chars().count() as f64 * char_px).ceil() as i32;
            if x > LEFT_PX && x + w > right {
                (x, row) = (LEFT_PX, row + 1);
            }
            let at = (x, row);
            x += w + GAP_PX;
            at
        })
        .collect()
}

/// Draws `entries` in a strip at the top of `root` and returns the area left for the plot.
pub fn above<'b>(
    root: &DrawingArea<SVGBackend<'b>, Shift>,
    entries: &[Entry],
) -> Result<DrawingArea<SVGBackend<'b>, Shift>, DrawingAreaErrorKind<std::io::Error>> {
    let at = layout(entries);
    let rows = at.iter().map(|&(_, r)| r + 1).max().unwrap_or(0);
    let (strip, plot) = root.split_vertically(rows * ROW_PX + 8);
    let font = TextStyle::from((svg::FONT, svg::LABEL_PX).into_font())
        .color(&svg::INK)
        .pos(Pos::new(HPos::Left, VPos::Center));
    for (e, (x, row)) in entries.iter().zip(at) {
        let y = 8 + row * ROW_PX + ROW_PX / 2;
        strip.draw(&Circle::new((x + 6, y), 4, e.marker))?;
        strip.draw(&Text::new(
            e.label.clone(),
            (x + MARKER_PX, y),
            font.clone(),
        ))?;
    }
    Ok(plot)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn entry(label: &str) -> Entry {
        Entry {
            marker: svg::INK.filled(),
            label: label.into(),
        }
    }

    #[test]
    fn entries_never_overlap_and_wrap_within_the_plots_width() {
        let entries: Vec<Entry> = (0..6)
            .map(|g| entry(&format!("gain state {g}")))
            .chain([entry("verification burst (hollow)")])
            .collect();
        let at = layout(&entries);
        let char_px = CHAR_EM * f64::from(svg::LABEL_PX) * 0.81;
        let end = |i: usize| {
            at[i].0 + MARKER_PX + (entries[i].label.chars().count() as f64 * char_px) as i32
        };
        for i in 0..entries.len() {
            assert!(
                end(i) <= svg::WIDTH as i32 - 16,
                "entry {i} leaves the plot"
            );
            if i > 0 && at[i].1 == at[i - 1].1 {
                assert!(at[i].0 >= end(i - 1) + GAP_PX, "entry {i} overlaps");
            }
        }
        assert!(
            at.last().expect("entries").1 >= 1,
            "seven entries take two rows"
        );
        // Three states and the hollow marker, the demo's, fit one row.
        let demo: Vec<Entry> = (0..3)
            .map(|g| entry(&format!("gain state {g}")))
            .chain([entry("verification burst (hollow)")])
            .collect();
        assert!(layout(&demo).iter().all(|a| a.1 == 0));
    }
}
