//! The report's palette, marker shapes and line dashes.
//!
//! A board pack is often printed in grey and read by people with colour-vision deficiency, so no
//! series is told apart by colour alone: each series style pairs a colour with its own marker shape
//! and dash pattern, and the colours alternate dark and light so they stay apart in grey.

use plotters::coord::CoordTranslate;
use plotters::prelude::*;

/// The backend every chart draws on: SVG written into a String.
pub type Svg<'a> = SVGBackend<'a>;

/// Body text and axes.
pub const INK: RGBColor = RGBColor(0x26, 0x2b, 0x33);
/// Secondary text and dominated points.
pub const MUTED: RGBColor = RGBColor(0x86, 0x8b, 0x93);
/// Grid lines.
pub const GRID: RGBColor = RGBColor(0xe4, 0xe6, 0xea);
/// Alternate row shading.
pub const ROW: RGBColor = RGBColor(0xf4, 0xf5, 0xf7);
/// Stress-window shading.
pub const STRESS: RGBColor = RGBColor(0xf3, 0xdf, 0xb8);
/// Boxes of the replication spread.
pub const BOX: RGBColor = RGBColor(0xc9, 0xd6, 0xe6);

/// The font family of every label; the SVG names it and the viewer supplies it.
pub const FONT: &str = "sans-serif";

/// A marker shape.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Marker {
    Circle,
    Triangle,
    Square,
    Diamond,
    Cross,
    TriangleDown,
}

/// Colour, marker and dash of one series.
#[derive(Clone, Copy, Debug)]
pub struct SeriesStyle {
    pub color: RGBColor,
    pub marker: Marker,
    /// Dash length and gap in pixels; None for a solid line.
    pub dash: Option<(u32, u32)>,
}

/// Six series styles: dark and light colours alternate, every one with its own shape and dash.
pub const SERIES: [SeriesStyle; 6] = [
    SeriesStyle {
        color: RGBColor(0x1d, 0x4e, 0x89),
        marker: Marker::Circle,
        dash: None,
    },
    SeriesStyle {
        color: RGBColor(0xe0, 0x80, 0x24),
        marker: Marker::Triangle,
        dash: Some((10, 5)),
    },
    SeriesStyle {
        color: RGBColor(0x2a, 0x8a, 0x7e),
        marker: Marker::Square,
        dash: Some((3, 4)),
    },
    SeriesStyle {
        color: RGBColor(0x8e, 0x2c, 0x48),
        marker: Marker::Diamond,
        dash: Some((14, 4)),
    },
    SeriesStyle {
        color: RGBColor(0xc9, 0xa2, 0x27),
        marker: Marker::TriangleDown,
        dash: Some((6, 3)),
    },
    SeriesStyle {
        color: RGBColor(0x5c, 0x5a, 0x9e),
        marker: Marker::Cross,
        dash: Some((2, 7)),
    },
];

/// Draws one marker centred at `at` (in the area's own coordinates), `size` pixels across its half.
/// A hollow marker is white inside with a coloured outline, so it reads on top of lines.
pub fn marker<C, CT>(
    area: &DrawingArea<Svg<'_>, CT>,
    at: C,
    shape: Marker,
    color: RGBColor,
    hollow: bool,
    size: i32,
) -> Result<(), super::BoardError>
where
    C: Clone + 'static,
    CT: CoordTranslate<From = C>,
{
    let s = size;
    let fill = if hollow { WHITE.filled() } else { color.filled() };
    let outline = color.stroke_width(2);
    let polygon: Vec<(i32, i32)> = match shape {
        Marker::Circle => {
            area.draw(&(EmptyElement::at(at.clone()) + Circle::new((0, 0), s, fill)))?;
            if hollow {
                area.draw(&(EmptyElement::at(at) + Circle::new((0, 0), s, outline)))?;
            }
            return Ok(());
        }
        Marker::Cross => {
            let w = color.stroke_width(3);
            area.draw(&(EmptyElement::at(at.clone()) + PathElement::new(vec![(-s, -s), (s, s)], w)))?;
            area.draw(&(EmptyElement::at(at) + PathElement::new(vec![(-s, s), (s, -s)], w)))?;
            return Ok(());
        }
        Marker::Square => {
            let h = s * 9 / 10;
            vec![(-h, -h), (h, -h), (h, h), (-h, h)]
        }
        Marker::Triangle => vec![(0, -s - 1), (s + 1, s), (-s - 1, s)],
        Marker::TriangleDown => vec![(0, s + 1), (s + 1, -s), (-s - 1, -s)],
        Marker::Diamond => vec![(0, -s - 1), (s + 1, 0), (0, s + 1), (-s - 1, 0)],
    };
    area.draw(&(EmptyElement::at(at.clone()) + Polygon::new(polygon.clone(), fill)))?;
    if hollow {
        let mut closed = polygon.clone();
        closed.push(polygon[0]);
        area.draw(&(EmptyElement::at(at) + PathElement::new(closed, outline)))?;
    }
    Ok(())
}

/// Draws a polyline solid or dashed.
pub fn line<C, CT>(
    area: &DrawingArea<Svg<'_>, CT>,
    points: Vec<C>,
    color: RGBColor,
    width: u32,
    dash: Option<(u32, u32)>,
) -> Result<(), super::BoardError>
where
    C: Clone + 'static,
    CT: CoordTranslate<From = C>,
{
    let style = color.stroke_width(width);
    match dash {
        None => area.draw(&PathElement::new(points, style))?,
        Some((on, off)) => {
            for element in DashedLineSeries::new(points, on as i32, off as i32, style) {
                area.draw(&element)?;
            }
        }
    }
    Ok(())
}

/// One legend entry: a marker, a line sample, a shaded band, or a combination.
#[derive(Clone, Debug)]
pub struct LegendEntry {
    pub label: String,
    pub color: RGBColor,
    pub marker: Option<Marker>,
    pub hollow: bool,
    /// Some(dash) draws a line sample with that dash (None inside: solid).
    pub line: Option<Option<(u32, u32)>>,
    /// Draws a filled swatch instead of a line.
    pub band: bool,
}

impl LegendEntry {
    /// A series entry: its marker on its line.
    pub fn series(label: impl Into<String>, s: SeriesStyle) -> Self {
        LegendEntry {
            label: label.into(),
            color: s.color,
            marker: Some(s.marker),
            hollow: false,
            line: Some(s.dash),
            band: false,
        }
    }

    /// A marker alone.
    pub fn mark(label: impl Into<String>, color: RGBColor, marker: Marker, hollow: bool) -> Self {
        LegendEntry {
            label: label.into(),
            color,
            marker: Some(marker),
            hollow,
            line: None,
            band: false,
        }
    }

    /// A shaded swatch.
    pub fn band(label: impl Into<String>, color: RGBColor) -> Self {
        LegendEntry {
            label: label.into(),
            color,
            marker: None,
            hollow: false,
            line: None,
            band: true,
        }
    }

    /// A line sample alone.
    pub fn line(label: impl Into<String>, color: RGBColor, dash: Option<(u32, u32)>) -> Self {
        LegendEntry {
            label: label.into(),
            color,
            marker: None,
            hollow: false,
            line: Some(dash),
            band: false,
        }
    }
}

/// Legend text size in pixels.
pub const LEGEND_FONT: u32 = 15;

/// Approximate width of `text` at `size` pixels, for layout (the SVG viewer has the real font).
pub fn text_width(text: &str, size: u32) -> i32 {
    (text.chars().count() as f64 * size as f64 * 0.56).ceil() as i32
}

/// Height a legend of these entries needs at `width` pixels, wrapping rows.
pub fn legend_height(entries: &[LegendEntry], width: i32) -> i32 {
    legend_rows(entries, width).len() as i32 * 26 + 14
}

fn legend_rows(entries: &[LegendEntry], width: i32) -> Vec<Vec<(usize, i32)>> {
    let mut rows: Vec<Vec<(usize, i32)>> = vec![Vec::new()];
    let mut x = 16;
    for (i, e) in entries.iter().enumerate() {
        let w = 44 + text_width(&e.label, LEGEND_FONT) + 26;
        if x + w > width - 8 && !rows.last().is_some_and(Vec::is_empty) {
            rows.push(Vec::new());
            x = 16;
        }
        rows.last_mut().expect("one row at least").push((i, x));
        x += w;
    }
    rows
}

/// Draws a legend across the top of `area`, wrapping to more rows when it does not fit.
pub fn legend(
    area: &DrawingArea<Svg<'_>, plotters::coord::Shift>,
    entries: &[LegendEntry],
) -> Result<(), super::BoardError> {
    let width = area.dim_in_pixel().0 as i32;
    let font = (FONT, LEGEND_FONT).into_font().color(&INK);
    for (r, row) in legend_rows(entries, width).iter().enumerate() {
        let y = 14 + r as i32 * 26;
        for &(i, x) in row {
            let e = &entries[i];
            if e.band {
                area.draw(&Rectangle::new([(x, y - 8), (x + 34, y + 8)], e.color.filled()))?;
            }
            if let Some(dash) = e.line {
                line(area, vec![(x, y), (x + 34, y)], e.color, 2, dash)?;
            }
            if let Some(m) = e.marker {
                marker(area, (x + 17, y), m, e.color, e.hollow, 5)?;
            }
            area.draw(&Text::new(e.label.clone(), (x + 44, y - 8), font.clone()))?;
        }
    }
    Ok(())
}
