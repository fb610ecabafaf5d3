//! Text on the image: the style's faces (by default the embedded DejaVu Sans, Bitstream Vera
//! licence, see `assets/fonts/LICENSE-DejaVu.txt`), single-line layout with kerning, and
//! coverage blending straight into the pixmap.

use ab_glyph::{point, Font as _, FontArc, PxScale, ScaleFont as _};
use tiny_skia::Pixmap;

/// The two faces the image uses.
pub(super) struct Fonts {
    /// Body text, legend and labels.
    pub regular: FontArc,
    /// The title.
    pub bold: FontArc,
}

impl Fonts {
    /// The style's faces (loaded and checked when the style was read).
    pub(super) fn of(style: &super::Style) -> Self {
        Self {
            regular: style.regular.clone(),
            bold: style.bold.clone(),
        }
    }
}

/// A face at a size in a colour. `size` is ab_glyph's pixel scale (ascent to descent).
#[derive(Clone, Copy)]
pub(super) struct Style<'f> {
    pub font: &'f FontArc,
    pub size: f32,
    pub rgb: [u8; 3],
}

/// Control characters (line breaks, tabs) are laid out as spaces: every text is one line.
fn visible(ch: char) -> char {
    if ch.is_control() {
        ' '
    } else {
        ch
    }
}

impl Style<'_> {
    /// Advance width of `text` in pixels.
    pub(super) fn width(&self, text: &str) -> f32 {
        let sf = self.font.as_scaled(PxScale::from(self.size));
        let mut prev = None;
        let mut w = 0.0;
        for ch in text.chars().map(visible) {
            let id = sf.glyph_id(ch);
            if let Some(p) = prev {
                w += sf.kern(p, id);
            }
            w += sf.h_advance(id);
            prev = Some(id);
        }
        w
    }

    /// `text` if it fits in `max_width`, else the longest prefix that fits with an ellipsis.
    pub(super) fn fit(&self, text: &str, max_width: f32) -> String {
        if self.width(text) <= max_width {
            return text.to_owned();
        }
        let mut cut: String = text.chars().map(visible).collect();
        while cut.pop().is_some() {
            let candidate = format!("{}…", cut.trim_end());
            if self.width(&candidate) <= max_width {
                return candidate;
            }
        }
        String::new()
    }

    /// Draws `text` with its left end at `x` on the baseline `baseline` (snapped to a whole pixel
    /// so stems stay crisp).
    pub(super) fn draw(&self, pixmap: &mut Pixmap, x: f32, baseline: f32, text: &str) {
        let sf = self.font.as_scaled(PxScale::from(self.size));
        let baseline = baseline.round();
        let mut caret = x;
        let mut prev = None;
        for ch in text.chars().map(visible) {
            let id = sf.glyph_id(ch);
            if let Some(p) = prev {
                caret += sf.kern(p, id);
            }
            let glyph = id.with_scale_and_position(self.size, point(caret, baseline));
            caret += sf.h_advance(id);
            prev = Some(id);
            let Some(outlined) = self.font.outline_glyph(glyph) else {
                continue;
            };
            let bounds = outlined.px_bounds();
            #[allow(
                clippy::cast_possible_truncation,
                reason = "glyph bounds are whole pixels near the image"
            )]
            let (left, top) = (bounds.min.x as i64, bounds.min.y as i64);
            outlined.draw(|gx, gy, coverage| {
                blend(
                    pixmap,
                    left + i64::from(gx),
                    top + i64::from(gy),
                    self.rgb,
                    coverage,
                );
            });
        }
    }

    /// Draws `text` with its right end at `right`.
    pub(super) fn draw_right(&self, pixmap: &mut Pixmap, right: f32, baseline: f32, text: &str) {
        self.draw(pixmap, right - self.width(text), baseline, text);
    }
}

/// Source-over of an opaque colour at `coverage` onto one premultiplied RGBA pixel; pixels off
/// the image are ignored.
fn blend(pixmap: &mut Pixmap, x: i64, y: i64, rgb: [u8; 3], coverage: f32) {
    let (Ok(x), Ok(y)) = (u32::try_from(x), u32::try_from(y)) else {
        return;
    };
    if x >= pixmap.width() || y >= pixmap.height() {
        return;
    }
    let a = coverage.clamp(0.0, 1.0);
    if a <= 0.0 {
        return;
    }
    let index = (y as usize * pixmap.width() as usize + x as usize) * 4;
    let Some(px) = pixmap.data_mut().get_mut(index..index + 4) else {
        return;
    };
    let src = [rgb[0], rgb[1], rgb[2], u8::MAX];
    for (d, s) in px.iter_mut().zip(src) {
        #[allow(
            clippy::cast_possible_truncation,
            clippy::cast_sign_loss,
            reason = "a convex mix of two bytes stays in 0..=255"
        )]
        let mixed = (f32::from(s) * a + f32::from(*d) * (1.0 - a)).round() as u8;
        *d = mixed;
    }
}
