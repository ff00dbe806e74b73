//! The PNG canvas: the bitmap backend with text drawn glyph by glyph at its true position.
//!
//! The bitmap backend places each glyph's drawn box at the pen position, dropping the glyph's
//! left side bearing, so narrow glyphs such as "1" or "l" sit too far left and text looks
//! unevenly spaced. Here each glyph is positioned by its outline bounds (bearing included);
//! everything else is the bitmap backend's own drawing.

use ab_glyph::{Font, FontRef, ScaleFont};
use plotters::prelude::*;
use plotters_backend::text_anchor::{HPos, VPos};
use plotters_backend::{
    BackendColor, BackendCoord, BackendStyle, BackendTextStyle, DrawingErrorKind, FontStyle,
};

pub struct PngCanvas<'a> {
    inner: BitMapBackend<'a>,
}

impl<'a> PngCanvas<'a> {
    pub fn new(pixels: &'a mut [u8], size: (u32, u32)) -> PngCanvas<'a> {
        PngCanvas {
            inner: BitMapBackend::with_buffer(pixels, size),
        }
    }
}

type Failure<'a> = DrawingErrorKind<<BitMapBackend<'a> as DrawingBackend>::ErrorType>;

impl<'a> DrawingBackend for PngCanvas<'a> {
    type ErrorType = <BitMapBackend<'a> as DrawingBackend>::ErrorType;

    fn get_size(&self) -> (u32, u32) {
        self.inner.get_size()
    }

    fn ensure_prepared(&mut self) -> Result<(), Failure<'a>> {
        self.inner.ensure_prepared()
    }

    fn present(&mut self) -> Result<(), Failure<'a>> {
        self.inner.present()
    }

    fn draw_pixel(&mut self, point: BackendCoord, color: BackendColor) -> Result<(), Failure<'a>> {
        self.inner.draw_pixel(point, color)
    }

    fn draw_line<S: BackendStyle>(
        &mut self,
        from: BackendCoord,
        to: BackendCoord,
        style: &S,
    ) -> Result<(), Failure<'a>> {
        self.inner.draw_line(from, to, style)
    }

    fn draw_rect<S: BackendStyle>(
        &mut self,
        upper_left: BackendCoord,
        bottom_right: BackendCoord,
        style: &S,
        fill: bool,
    ) -> Result<(), Failure<'a>> {
        self.inner.draw_rect(upper_left, bottom_right, style, fill)
    }

    fn draw_path<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        path: I,
        style: &S,
    ) -> Result<(), Failure<'a>> {
        self.inner.draw_path(path, style)
    }

    fn draw_circle<S: BackendStyle>(
        &mut self,
        center: BackendCoord,
        radius: u32,
        style: &S,
        fill: bool,
    ) -> Result<(), Failure<'a>> {
        self.inner.draw_circle(center, radius, style, fill)
    }

    fn fill_polygon<S: BackendStyle, I: IntoIterator<Item = BackendCoord>>(
        &mut self,
        vert: I,
        style: &S,
    ) -> Result<(), Failure<'a>> {
        self.inner.fill_polygon(vert, style)
    }

    /// As the default text drawing (anchor, layout box, rotation), with glyphs placed by their
    /// outline bounds.
    fn draw_text<S: BackendTextStyle>(
        &mut self,
        text: &str,
        style: &S,
        pos: BackendCoord,
    ) -> Result<(), Failure<'a>> {
        let color = style.color();
        if color.alpha == 0.0 {
            return Ok(());
        }
        let bytes = match style.style() {
            FontStyle::Bold => dejavu::sans::bold(),
            _ => dejavu::sans::regular(),
        };
        let Ok(font) = FontRef::try_from_slice(bytes) else {
            return Ok(());
        };
        let size = style.size() as f32;
        let scaled = font.as_scaled(size);
        // The layout box as the bitmap backend estimates it (advances and kerning).
        let mut width = 0.0_f32;
        let mut previous = None;
        for c in text.chars() {
            let id = scaled.glyph_id(c);
            width += scaled.h_advance(id) + previous.map_or(0.0, |p| scaled.kern(p, id));
            previous = Some(id);
        }
        let (width, height) = (width as i32, (style.size() / 1.24) as i32);
        let dx = match style.anchor().h_pos {
            HPos::Left => 0,
            HPos::Right => -width,
            HPos::Center => -width / 2,
        };
        let dy = match style.anchor().v_pos {
            VPos::Top => 0,
            VPos::Center => -height / 2,
            VPos::Bottom => -height,
        };
        let transform = style.transform();
        let (w, h) = self.get_size();
        let mut pen = 0.0_f32;
        let mut previous = None;
        for c in text.chars() {
            let id = scaled.glyph_id(c);
            pen += previous.map_or(0.0, |p| scaled.kern(p, id));
            previous = Some(id);
            let glyph = id.with_scale_and_position(size, ab_glyph::point(pen, 0.0));
            pen += scaled.h_advance(id);
            let Some(outline) = font.outline_glyph(glyph) else {
                continue;
            };
            let bounds = outline.px_bounds();
            // Baseline half an em below the box top, as the bitmap backend has it.
            let (left, top) = (bounds.min.x as i32, (size / 2.0 + bounds.min.y) as i32);
            let mut coverage = Vec::new();
            outline.draw(|x, y, c| coverage.push((x as i32 + left, y as i32 + top, c)));
            for (x, y, c) in coverage {
                let (x, y) = transform.transform(x + dx, y + dy);
                let (x, y) = (pos.0 + x, pos.1 + y);
                if x >= 0 && x < w as i32 && y >= 0 && y < h as i32 {
                    let shade = BackendColor {
                        alpha: color.alpha * f64::from(c),
                        rgb: color.rgb,
                    };
                    self.draw_pixel((x, y), shade)?;
                }
            }
        }
        Ok(())
    }
}
