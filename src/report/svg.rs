//! What every plot shares: size, palette, fonts and the one way a plot becomes SVG text.
//!
//! Text is left to the browser: plotters' SVG backend writes `<text>` elements (escaped) with a
//! generic font family, so no font file is read or embedded and nothing is rasterised.

use super::ReportError;
use plotters::chart::MeshStyle;
use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;
use std::ops::Range;

/// Plot width, px.
pub const WIDTH: u32 = 760;
/// Plot height, px.
pub const HEIGHT: u32 = 340;

/// Axis and label font.
pub const FONT: &str = "sans-serif";

/// Ink for axes and text.
pub const INK: RGBColor = RGBColor(0x27, 0x2d, 0x36);
/// Light grid lines.
pub const GRID: RGBColor = RGBColor(0xe3, 0xe6, 0xea);

/// Colours of gain states, by index (repeating beyond six); chosen to stay apart for the common
/// colour-vision deficiencies and on paper.
const STATES: [RGBColor; 6] = [
    RGBColor(0x1f, 0x5f, 0x8b),
    RGBColor(0xd9, 0x82, 0x2b),
    RGBColor(0x5c, 0x9e, 0x6e),
    RGBColor(0x8e, 0x4f, 0x9c),
    RGBColor(0xb8, 0x3b, 0x3b),
    RGBColor(0x6b, 0x72, 0x7b),
];

/// The colour of gain state `g`.
pub fn state_colour(g: u32) -> RGBColor {
    STATES[g as usize % STATES.len()]
}

/// Colours of channels, by their order in the table (repeating beyond five): none is a gain
/// state's, so a plot whose x axis is the gain state never reads a channel as a state.
const CHANNELS: [RGBColor; 5] = [
    RGBColor(0x2a, 0x2f, 0x38),
    RGBColor(0xe0, 0x40, 0x9a),
    RGBColor(0x12, 0xb0, 0xb8),
    RGBColor(0x7f, 0x8c, 0x1d),
    RGBColor(0x5a, 0x3e, 0x1c),
];

/// The colour of the `i`-th channel.
pub fn channel_colour(i: usize) -> RGBColor {
    CHANNELS[i % CHANNELS.len()]
}

/// Label size as plotters takes it. Its SVG backend writes about 0.81 of it as the font size
/// (17 → 13.7 px), and the page's stylesheet never shows a plot narrower than 640 px (a
/// narrower card scrolls it), so on screen the text stays at least 13.7 × 640 / 760 ≈ 11.5 px
/// (tests/browser.rs measures it at 390 px).
pub const LABEL_PX: u32 = 17;
/// Axis description size, as plotters takes it.
pub const DESC_PX: u32 = 18;

/// Draws a plot into SVG text. `plot` names it in errors.
pub fn render<E: std::fmt::Display>(
    plot: &'static str,
    draw: impl FnOnce(&DrawingArea<SVGBackend<'_>, Shift>) -> Result<(), E>,
) -> Result<String, ReportError> {
    let mut out = String::new();
    {
        let root = SVGBackend::with_string(&mut out, (WIDTH, HEIGHT)).into_drawing_area();
        let err = |e: &dyn std::fmt::Display| ReportError::Plot {
            plot,
            message: e.to_string(),
        };
        root.fill(&WHITE).map_err(|e| err(&e))?;
        draw(&root).map_err(|e| err(&e))?;
        root.present().map_err(|e| err(&e))?;
    }
    Ok(out)
}

/// A plot's chart: linear axes on the SVG drawing area.
pub type Chart<'a, 'b> =
    ChartContext<'a, SVGBackend<'b>, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// The chart every plot draws on: the shared margins and label areas around `x` by `y`.
pub fn chart<'a, 'b>(
    root: &'a DrawingArea<SVGBackend<'b>, Shift>,
    x: Range<f64>,
    y: Range<f64>,
) -> Result<Chart<'a, 'b>, DrawingAreaErrorKind<std::io::Error>> {
    ChartBuilder::on(root)
        .margin(16)
        .x_label_area_size(50)
        .y_label_area_size(72)
        .build_cartesian_2d(x, y)
}

/// The shared grid, axes and fonts with the axes' descriptions; the caller adds label
/// settings and draws it.
pub fn mesh<'a, 'c, 'b>(
    chart: &'c mut Chart<'a, 'b>,
    x_desc: &str,
    y_desc: &str,
) -> MeshStyle<'a, 'c, RangedCoordf64, RangedCoordf64, SVGBackend<'b>> {
    let mut mesh = chart.configure_mesh();
    mesh.light_line_style(TRANSPARENT)
        .bold_line_style(GRID)
        .axis_style(INK)
        .x_desc(x_desc)
        .y_desc(y_desc)
        .label_style((FONT, LABEL_PX, &INK))
        .axis_desc_style((FONT, DESC_PX, &INK));
    mesh
}

/// The range of `values` widened by `pad` of its span on each side (and never empty).
pub fn padded(values: impl Iterator<Item = f64>, pad: f64) -> Option<(f64, f64)> {
    let (lo, hi) = values
        .filter(|v| v.is_finite())
        .fold(None, |acc: Option<(f64, f64)>, v| match acc {
            None => Some((v, v)),
            Some((lo, hi)) => Some((lo.min(v), hi.max(v))),
        })?;
    let span = (hi - lo).max(hi.abs().max(1.0) * 1e-3);
    Some((lo - pad * span, hi + pad * span))
}

/// Labels an axis position with an integer when it is one, else nothing: gain states and
/// categories sit on whole numbers.
pub fn whole(x: &f64) -> String {
    if (x - x.round()).abs() < 1e-6 {
        format!("{}", x.round() as i64)
    } else {
        String::new()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn no_channel_is_drawn_in_a_gain_states_colour() {
        // Squared distance in RGB: below 60² two colours read as one in a small marker
        // (from memory; a coarse stand-in for a perceptual distance).
        let far = |a: RGBColor, b: RGBColor| {
            let d = |x: u8, y: u8| (i32::from(x) - i32::from(y)).pow(2);
            d(a.0, b.0) + d(a.1, b.1) + d(a.2, b.2) >= 60 * 60
        };
        for c in CHANNELS {
            for s in STATES {
                assert!(far(c, s), "channel {c:?} against state {s:?}");
            }
        }
    }
}
