//! Plot infrastructure shared by every figure: the embedded font (DejaVu Sans, which covers
//! IPA), colours computed in the OKLab perceptual space (Ottosson 2020) as evenly spaced hues,
//! our own sequential ramp for heatmaps, and a helper that draws one figure to both PNG and
//! SVG in memory ([`Drawn`]). Figures live beside this file, one module per analysis, and
//! read records only; the report page ([`page`]) and the terminal summaries ([`summary`])
//! too. Nothing here computes an analysis or writes a file.

pub mod abx;
pub mod compare;
pub mod map;
pub mod mdl;
pub mod page;
pub mod palette;
pub mod probe;
pub mod summary;

use std::path::PathBuf;
use std::sync::Once;

use plotters::coord::Shift;
use plotters::prelude::*;

pub use palette::{category_colours, ramp, Rgb};

/// The embedded font, registered under the family name [`FONT`].
static FONT_BYTES: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");
/// Family name under which the embedded font is registered.
pub const FONT: &str = "sans-serif";

static REGISTER: Once = Once::new();

/// Register the embedded font with plotters (idempotent).
pub fn register_font() {
    REGISTER.call_once(|| {
        // The font is compiled in and known good; failure here would be a build defect.
        let _ = plotters::style::register_font(FONT, FontStyle::Normal, FONT_BYTES);
        let _ = plotters::style::register_font(FONT, FontStyle::Bold, FONT_BYTES);
    });
}

/// Errors while drawing (always internal: exit code 1).
#[derive(Debug, thiserror::Error)]
#[error("{path}: drawing failed: {message}")]
pub struct PlotError {
    /// The picture.
    pub path: PathBuf,
    /// What went wrong.
    pub message: String,
}

/// A figure that can draw itself onto any plotters backend.
pub trait Figure {
    /// Size in pixels (width, height).
    fn size(&self) -> (u32, u32);
    /// Draw onto `area`.
    fn draw<DB: DrawingBackend>(&self, area: &DrawingArea<DB, Shift>) -> Result<(), String>;
}

/// A figure drawn once, as PNG bytes and an SVG document, under its file stem (the writer
/// puts it in `<stem>.png` and `<stem>.svg`; the report page embeds the same bytes).
#[derive(Clone, Debug)]
pub struct Drawn {
    /// File name without extension, e.g. `probe` or `map_phone`.
    pub stem: String,
    /// Caption on the report page.
    pub title: String,
    /// The PNG file.
    pub png: Vec<u8>,
    /// The SVG document.
    pub svg: String,
}

/// Draw `fig` to PNG and SVG in memory.
pub fn draw<F: Figure>(fig: &F, stem: &str, title: &str) -> Result<Drawn, PlotError> {
    let err = |m: String| PlotError {
        path: PathBuf::from(stem),
        message: m,
    };
    let (w, h) = fig.size();
    let mut buf = vec![0u8; (w as usize) * (h as usize) * 3];
    {
        register_font();
        let backend = BitMapBackend::with_buffer(&mut buf, (w, h));
        let area = backend.into_drawing_area();
        area.fill(&WHITE).map_err(|e| err(e.to_string()))?;
        fig.draw(&area).map_err(err)?;
        area.present().map_err(|e| err(e.to_string()))?;
    }
    let png = encode_png(&buf, w, h).map_err(err)?;
    let svg = to_svg(fig).map_err(err)?;
    Ok(Drawn {
        stem: stem.to_string(),
        title: title.to_string(),
        png,
        svg,
    })
}

/// Render `fig` to an SVG string.
pub fn to_svg<F: Figure>(fig: &F) -> Result<String, String> {
    register_font();
    let (w, h) = fig.size();
    let mut svg = String::new();
    {
        let backend = SVGBackend::with_string(&mut svg, (w, h));
        let area = backend.into_drawing_area();
        area.fill(&WHITE).map_err(|e| e.to_string())?;
        fig.draw(&area)?;
        area.present().map_err(|e| e.to_string())?;
    }
    Ok(svg)
}

fn encode_png(rgb: &[u8], w: u32, h: u32) -> Result<Vec<u8>, String> {
    let mut out = Vec::new();
    {
        let mut enc = png::Encoder::new(&mut out, w, h);
        enc.set_color(png::ColorType::Rgb);
        enc.set_depth(png::BitDepth::Eight);
        let mut wr = enc.write_header().map_err(|e| e.to_string())?;
        wr.write_image_data(rgb).map_err(|e| e.to_string())?;
    }
    Ok(out)
}

/// Text style in the embedded font.
pub fn text(size: f64) -> TextStyle<'static> {
    (FONT, size).into_font().into()
}

/// Map any drawing error to a string (for `?` inside [`Figure::draw`]).
pub fn e2s<E: std::fmt::Display>(e: E) -> String {
    e.to_string()
}

#[cfg(test)]
mod glyph_tests {
    use super::*;

    /// Render `text` alone in the embedded font onto a small white canvas (grey pixels).
    fn render(text: &str) -> Vec<u8> {
        register_font();
        let (w, h) = (48u32, 48u32);
        let mut buf = vec![255u8; (w * h * 3) as usize];
        {
            let area = BitMapBackend::with_buffer(&mut buf, (w, h)).into_drawing_area();
            let style = (FONT, 32).into_font().color(&BLACK);
            area.draw_text(text, &style, (6, 4)).unwrap();
            area.present().unwrap();
        }
        buf
    }

    #[test]
    fn ipa_and_hebrew_labels_render_as_real_glyphs() {
        // U+E000 (private use) is not in DejaVu Sans, so it draws the missing-glyph box; each
        // label character must draw something (not blank) and not that box.
        let missing = render("\u{E000}");
        let blank = vec![255u8; missing.len()];
        assert_ne!(missing, blank, "the missing-glyph box itself drew nothing");
        for c in [
            "ʃ", "ʒ", "ŋ", "ɪ", "ɛ", "æ", "ɑ", "ɔ", "ʊ", "ʌ", "ə", "ɜ", "θ", "ð", "ʔ", "ː", "ɾ",
            "ɹ", "ע", "ש", "é", "ü",
        ] {
            let got = render(c);
            assert_ne!(got, blank, "{c} drew nothing");
            assert_ne!(got, missing, "{c} drew the missing-glyph box");
        }
    }
}
