//! A small figure model and its renderer: one drawing routine for SVG text and PNG pixels.
//!
//! Axes may be logarithmic; the data are transformed here (log10) and the tick labels show the
//! original values, so every chart goes through the same linear plotting code. Each series gets
//! a colour, a line pattern and a marker from fixed cycles, so twelve series stay distinct on
//! screen and in greyscale print. The legend sits in its own panel and never covers data.
//! Text in PNGs uses the DejaVu Sans font compiled into the binary (no system fonts needed).

use std::sync::Once;

use plotters::coord::types::RangedCoordf64;
use plotters::coord::Shift;
use plotters::prelude::*;
use plotters::style::text_anchor::{HPos, Pos, VPos};

/// Pixel size of every chart: readable when scaled to a report page.
pub const SIZE: (u32, u32) = (1000, 620);
const LEGEND_WIDTH: u32 = 210;
const FONT: &str = "sans-serif";

/// The plot panel: linear coordinates (log axes are transformed before drawing).
type Plot<'a, DB> = ChartContext<'a, DB, Cartesian2d<RangedCoordf64, RangedCoordf64>>;

/// Our palette: twelve hues in an order of our own, lightness alternating between neighbours
/// (relative luminance steps of at least 30 of 255) so that greyscale print keeps consecutive
/// series apart, and dark/light pairs rather than red/green pairs carrying the difference, so
/// that the common colour-vision deficiencies do too; line patterns and markers add a second
/// cue (see [`style`]).
const PALETTE: [(u8, u8, u8); 12] = [
    (0x00, 0x58, 0x5e), // deep teal
    (0xe8, 0xa3, 0x3d), // amber
    (0x3b, 0x3b, 0x98), // indigo
    (0xd1, 0x49, 0x2e), // vermilion
    (0x5f, 0xb0, 0xd8), // sky
    (0x2b, 0x2b, 0x2b), // charcoal
    (0xb8, 0x3b, 0x7d), // rose
    (0x9a, 0xae, 0x3a), // olive-lime
    (0x6b, 0x3e, 0x1f), // chocolate
    (0x7d, 0x8a, 0x99), // slate
    (0x2f, 0x7d, 0x3c), // pine
    (0xc9, 0xb3, 0x7e), // sand
];

/// Line patterns cycle with a period coprime to the palette's, so no two of the first twelve
/// series share both colour and pattern.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Pattern {
    Solid,
    Dashed,
    Dotted,
}

#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Marker {
    None,
    Circle,
    Triangle,
    Square,
}

/// The look of series number k.
pub fn style(k: usize) -> (RGBColor, Pattern, Marker) {
    let (r, g, b) = PALETTE[k % PALETTE.len()];
    let pattern = [Pattern::Solid, Pattern::Dashed, Pattern::Dotted][k % 3];
    let marker = [Marker::None, Marker::Circle, Marker::Triangle, Marker::Square][(k / 3) % 4];
    (RGBColor(r, g, b), pattern, marker)
}

#[derive(Debug, Clone)]
pub struct Series {
    pub name: String,
    pub points: Vec<(f64, f64)>,
    /// Index into the style cycles; two series may share one (e.g. forward and reverse rate).
    pub style: usize,
    /// Overrides the style's pattern (used to pair a solid and a dashed line).
    pub pattern: Option<Pattern>,
}

/// A horizontal reference line, drawn thin and dashed in a series' colour.
#[derive(Debug, Clone)]
pub struct Level {
    pub y: f64,
    pub style: usize,
}

/// A shaded horizontal band (e.g. a tolerance band around an equilibrium value).
#[derive(Debug, Clone)]
pub struct Band {
    pub low: f64,
    pub high: f64,
    pub style: usize,
}

/// A labelled vertical marker line (e.g. the time to equilibrium at one tolerance).
#[derive(Debug, Clone)]
pub struct Mark {
    pub x: f64,
    pub label: String,
}

/// A filled box in data coordinates (a bar of a bar chart).
#[derive(Debug, Clone)]
pub struct Block {
    pub x: (f64, f64),
    pub y: (f64, f64),
    pub style: usize,
}

#[derive(Debug, Clone, Default)]
pub struct Figure {
    pub title: String,
    pub x_label: String,
    pub y_label: String,
    pub x_log: bool,
    pub y_log: bool,
    /// Data ranges in data units (positive for log axes).
    pub x_range: (f64, f64),
    pub y_range: (f64, f64),
    pub series: Vec<Series>,
    pub levels: Vec<Level>,
    pub bands: Vec<Band>,
    pub marks: Vec<Mark>,
    /// Extra legend entries under the series: a short explanation line each.
    pub notes: Vec<String>,
    /// Filled boxes, drawn over the guides and under the curves.
    pub blocks: Vec<Block>,
    /// Names for the whole-number positions of the y axis (a category axis), when not empty.
    pub y_categories: Vec<String>,
}

static FONT_ONCE: Once = Once::new();

fn register_font() {
    FONT_ONCE.call_once(|| {
        // The font is bundled and valid; a failure here would only lose text, not data.
        let _ = plotters::style::register_font(FONT, FontStyle::Normal, dejavu::sans::regular());
        let _ = plotters::style::register_font(FONT, FontStyle::Bold, dejavu::sans::bold());
    });
}

impl Figure {
    fn tx(&self, x: f64) -> f64 {
        if self.x_log {
            x.max(f64::MIN_POSITIVE).log10()
        } else {
            x
        }
    }

    fn ty(&self, y: f64) -> f64 {
        if self.y_log {
            y.max(f64::MIN_POSITIVE).log10()
        } else {
            y
        }
    }

    /// The figure as SVG text and PNG bytes.
    pub fn render(&self) -> Result<(String, Vec<u8>), String> {
        register_font();
        let mut svg = String::new();
        self.draw(&SVGBackend::with_string(&mut svg, SIZE).into_drawing_area())?;
        let mut pixels = vec![0u8; (SIZE.0 * SIZE.1 * 3) as usize];
        self.draw(&super::raster::PngCanvas::new(&mut pixels, SIZE).into_drawing_area())?;
        Ok((svg, encode_png(&pixels, SIZE)?))
    }

    fn draw<DB: DrawingBackend>(&self, root: &DrawingArea<DB, Shift>) -> Result<(), String> {
        let fail = |e: DrawingAreaErrorKind<DB::ErrorType>| e.to_string();
        root.fill(&WHITE).map_err(fail)?;
        let (plot_area, legend_area) = root.split_horizontally(SIZE.0 - LEGEND_WIDTH);
        let (x0, x1) = (self.tx(self.x_range.0), self.tx(self.x_range.1));
        let (y0, y1) = (self.ty(self.y_range.0), self.ty(self.y_range.1));
        let (x1, y1) = (
            if x1 > x0 { x1 } else { x0 + 1.0 },
            if y1 > y0 { y1 } else { y0 + 1.0 },
        );
        let mut chart = ChartBuilder::on(&plot_area)
            .caption(&self.title, (FONT, 22).into_font())
            .margin(16)
            .x_label_area_size(48)
            .y_label_area_size(82)
            .build_cartesian_2d(x0..x1, y0..y1)
            .map_err(fail)?;
        let (x_log, y_log) = (self.x_log, self.y_log);
        chart
            .configure_mesh()
            .x_desc(self.x_label.as_str())
            .y_desc(self.y_label.as_str())
            .axis_desc_style((FONT, 16))
            .label_style((FONT, 14))
            .light_line_style(RGBColor(0xee, 0xee, 0xee))
            .bold_line_style(RGBColor(0xd0, 0xd0, 0xd0))
            .x_label_formatter(&|x| tick_label(*x, x_log, (x0, x1)))
            .y_label_formatter(&|y| match self.y_categories.is_empty() {
                true => tick_label(*y, y_log, (y0, y1)),
                false => category(&self.y_categories, *y),
            })
            .draw()
            .map_err(fail)?;
        let frame = (x0, x1, y0, y1);
        self.draw_guides(&mut chart, frame).map_err(fail)?;
        for block in &self.blocks {
            let (colour, _, _) = style(block.style);
            let corners = [
                (self.tx(block.x.0), self.ty(block.y.0)),
                (self.tx(block.x.1), self.ty(block.y.1)),
            ];
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    corners,
                    colour.mix(0.85).filled(),
                )))
                .map_err(fail)?;
        }
        for series in &self.series {
            self.draw_curve(&mut chart, series).map_err(fail)?;
        }
        self.draw_legend(&legend_area).map_err(fail)?;
        root.present().map_err(fail)
    }

    /// Shaded tolerance bands, dashed reference levels and labelled vertical marks, under the
    /// curves.
    fn draw_guides<DB: DrawingBackend>(
        &self,
        chart: &mut Plot<'_, DB>,
        (x0, x1, y0, y1): (f64, f64, f64, f64),
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        for band in &self.bands {
            let (colour, _, _) = style(band.style);
            let rect = Rectangle::new(
                [(x0, self.ty(band.low)), (x1, self.ty(band.high))],
                // Light enough that where bands overlap the colours still read apart.
                colour.mix(0.07).filled(),
            );
            chart.draw_series(std::iter::once(rect))?;
        }
        for level in &self.levels {
            let (colour, _, _) = style(level.style);
            let y = self.ty(level.y);
            let line = colour.mix(0.7).stroke_width(1);
            chart.draw_series(DashedLineSeries::new([(x0, y), (x1, y)], 6, 6, line))?;
        }
        let grey = RGBColor(0x44, 0x44, 0x44);
        for (k, mark) in self.marks.iter().enumerate() {
            let x = self.tx(mark.x);
            if !(x0..=x1).contains(&x) {
                continue;
            }
            chart.draw_series(DashedLineSeries::new(
                [(x, y0), (x, y1)],
                3,
                4,
                grey.stroke_width(1),
            ))?;
            // Beside the line, not on it: to its right, or to its left in the last third.
            let y_text = y1 - (y1 - y0) * (0.04 + 0.06 * k as f64);
            let right_side = x < x0 + 0.68 * (x1 - x0);
            let gap = 0.008 * (x1 - x0);
            let (x_text, anchor) = match right_side {
                true => (x + gap, HPos::Left),
                false => (x - gap, HPos::Right),
            };
            let font = TextStyle::from((FONT, 13).into_font())
                .color(&grey)
                .pos(Pos::new(anchor, VPos::Center));
            chart.draw_series(std::iter::once(Text::new(
                mark.label.clone(),
                (x_text, y_text),
                font,
            )))?;
        }
        Ok(())
    }

    /// One series: its line in its pattern, and its marker at a dozen evenly spaced points so
    /// markers show without crowding the line.
    fn draw_curve<DB: DrawingBackend>(
        &self,
        chart: &mut Plot<'_, DB>,
        series: &Series,
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        let (colour, pattern, marker) = style(series.style);
        let pattern = series.pattern.unwrap_or(pattern);
        let points: Vec<(f64, f64)> = series
            .points
            .iter()
            .filter(|(x, y)| {
                x.is_finite() && y.is_finite() && (!self.y_log || *y > 0.0) && (!self.x_log || *x > 0.0)
            })
            .map(|&(x, y)| (self.tx(x), self.ty(y)))
            .collect();
        let line = colour.stroke_width(2);
        match pattern {
            Pattern::Solid => chart.draw_series(LineSeries::new(points.clone(), line)),
            Pattern::Dashed => chart.draw_series(DashedLineSeries::new(points.clone(), 9, 5, line)),
            Pattern::Dotted => chart.draw_series(DashedLineSeries::new(points.clone(), 2, 4, line)),
        }?;
        let every = (points.len() / 12).max(1);
        let sparse = points.iter().copied().step_by(every);
        match marker {
            Marker::None => return Ok(()),
            Marker::Circle => chart.draw_series(sparse.map(|p| Circle::new(p, 4, colour.filled()))),
            Marker::Triangle => chart.draw_series(sparse.map(|p| TriangleMarker::new(p, 5, colour.filled()))),
            Marker::Square => chart.draw_series(
                sparse.map(|p| EmptyElement::at(p) + Rectangle::new([(-3, -3), (3, 3)], colour.filled())),
            ),
        }?;
        Ok(())
    }

    fn draw_legend<DB: DrawingBackend>(
        &self,
        area: &DrawingArea<DB, Shift>,
    ) -> Result<(), DrawingAreaErrorKind<DB::ErrorType>> {
        let text = |size: u32| TextStyle::from((FONT, size).into_font()).color(&BLACK);
        let mut y = 56;
        for series in &self.series {
            let (colour, pattern, marker) = style(series.style);
            let pattern = series.pattern.unwrap_or(pattern);
            let segments: Vec<(i32, i32)> = match pattern {
                Pattern::Solid => vec![(10, 46)],
                Pattern::Dashed => vec![(10, 22), (27, 39), (44, 46)],
                Pattern::Dotted => (0..7).map(|k| (10 + 5 * k, 12 + 5 * k)).collect(),
            };
            for (a, b) in segments {
                area.draw(&PathElement::new(vec![(a, y), (b, y)], colour.stroke_width(3)))?;
            }
            match marker {
                Marker::None => {}
                Marker::Circle => area.draw(&Circle::new((28, y), 4, colour.filled()))?,
                Marker::Triangle => area.draw(&TriangleMarker::new((28, y), 5, colour.filled()))?,
                Marker::Square => area.draw(&Rectangle::new([(25, y - 3), (31, y + 3)], colour.filled()))?,
            }
            let name: String = series.name.chars().take(24).collect();
            area.draw(&Text::new(name, (54, y - 8), text(14)))?;
            y += 24;
        }
        y += 8;
        for note in &self.notes {
            for line in wrap(note, 28) {
                area.draw(&Text::new(line, (10, y - 8), text(12)))?;
                y += 17;
            }
            y += 4;
        }
        Ok(())
    }
}

/// Splits text into lines of at most `width` characters at spaces.
fn wrap(text: &str, width: usize) -> Vec<String> {
    let mut lines = Vec::new();
    let mut line = String::new();
    for word in text.split_whitespace() {
        if !line.is_empty() && line.len() + 1 + word.len() > width {
            lines.push(std::mem::take(&mut line));
        }
        if !line.is_empty() {
            line.push(' ');
        }
        line.push_str(word);
    }
    if !line.is_empty() {
        lines.push(line);
    }
    lines
}

/// Tick label: on a log axis only whole decades are labelled, with their plain value.
/// The category at a whole-number position of a category axis; nothing between positions.
fn category(names: &[String], v: f64) -> String {
    let k = v.round();
    if (v - k).abs() > 1e-6 || k < 0.0 {
        return String::new();
    }
    names.get(k as usize).cloned().unwrap_or_default()
}

/// A tick label in the one format of its axis (`lo`..`hi`): on a log axis every decade as a
/// plain number when all of them fit between 0.001 and 10000, else every one as 1e<k>; on a
/// linear axis plain numbers unless the axis reaches 1e5 or stays below 1e-3, then every tick
/// in the same scientific form. Rounding noise at zero (−2.2e-16) reads as 0.
fn tick_label(v: f64, log: bool, (lo, hi): (f64, f64)) -> String {
    if log {
        if (v - v.round()).abs() > 1e-6 {
            return String::new();
        }
        let decade = v.round() as i32;
        let plain = lo.floor() >= -3.0 && hi.ceil() <= 4.0;
        return if plain {
            crate::format::trim_number(10f64.powi(decade))
        } else {
            format!("1e{decade}")
        };
    }
    let span = hi - lo;
    let v = if v.abs() < 1e-9 * span.abs() { 0.0 } else { v };
    let largest = lo.abs().max(hi.abs());
    if largest >= 1e5 || (largest < 1e-3 && largest > 0.0) {
        if v == 0.0 {
            return "0".into();
        }
        // As many mantissa digits as the tick spacing needs, the same for every tick.
        let exponent = largest.log10().floor();
        let digits = ((exponent - (span / 10.0).abs().log10().floor()).max(0.0) as usize).min(6);
        let mantissa = v / 10f64.powf(exponent);
        return format!("{mantissa:.digits$}e{exponent}");
    }
    crate::format::trim_number(v)
}

fn encode_png(rgb: &[u8], (width, height): (u32, u32)) -> Result<Vec<u8>, String> {
    let mut bytes = Vec::new();
    {
        let mut encoder = png::Encoder::new(&mut bytes, width, height);
        encoder.set_color(png::ColorType::Rgb);
        encoder.set_depth(png::BitDepth::Eight);
        let mut writer = encoder.write_header().map_err(|e| e.to_string())?;
        writer.write_image_data(rgb).map_err(|e| e.to_string())?;
    }
    Ok(bytes)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn neighbouring_colours_differ_in_lightness() {
        // Relative luminance (ITU-R BT.709 weights on the 8-bit values, a common shortcut):
        // consecutive series at least 30 apart, so greyscale keeps them apart.
        let luminance = |(r, g, b): (u8, u8, u8)| 0.2126 * r as f64 + 0.7152 * g as f64 + 0.0722 * b as f64;
        for k in 0..PALETTE.len() {
            let (a, b) = (PALETTE[k], PALETTE[(k + 1) % PALETTE.len()]);
            assert!((luminance(a) - luminance(b)).abs() >= 30.0, "{k}: {a:?} {b:?}");
        }
    }

    #[test]
    fn an_axis_keeps_one_tick_format() {
        let log: Vec<String> = (3..=6).map(|d| tick_label(d as f64, true, (3.0, 6.0))).collect();
        assert_eq!(log, ["1e3", "1e4", "1e5", "1e6"]);
        let small: Vec<String> = (-1..=2)
            .map(|d| tick_label(d as f64, true, (-1.0, 2.0)))
            .collect();
        assert_eq!(small, ["0.1", "1", "10", "100"]);
        let linear: Vec<String> = [0.0, 50_000.0, 100_000.0, 150_000.0]
            .iter()
            .map(|&v| tick_label(v, false, (0.0, 150_000.0)))
            .collect();
        assert_eq!(linear, ["0", "0.5e5", "1.0e5", "1.5e5"]);
    }

    #[test]
    fn the_first_twelve_styles_are_all_different() {
        for a in 0..12 {
            for b in 0..a {
                let (ca, pa, ma) = style(a);
                let (cb, pb, mb) = style(b);
                assert!(ca != cb || pa != pb || ma != mb, "styles {a} and {b} coincide");
            }
        }
    }
}
