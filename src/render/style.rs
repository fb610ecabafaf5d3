//! Map styles: the colours, colour maps, strokes, fonts and type sizes of heat images and tiles,
//! read from TOML files.
//!
//! `styles/default.toml` is complete and documents every key. Every other style, built in
//! (`dark`, `print`) or a user's file, is merged key by key on top of it (or on top of the
//! built-in style named by its `extends` key), so a style file lists only what it changes.
//! Unknown keys are refused, so a typo does not silently fall back to a default.

use std::path::{Path, PathBuf};

use ab_glyph::FontArc;
use serde::Deserialize;

use super::Colormap;

/// The built-in styles: name and TOML text.
const BUILTIN: [(&str, &str); 3] = [
    ("default", include_str!("../../styles/default.toml")),
    ("dark", include_str!("../../styles/dark.toml")),
    ("print", include_str!("../../styles/print.toml")),
];

/// DejaVu Sans, regular.
static REGULAR: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");
/// DejaVu Sans, bold.
static BOLD: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans-Bold.ttf");

/// Font files larger than this are refused (the DejaVu faces are under 1 MB).
const MAX_FONT_BYTES: u64 = 32 * 1024 * 1024;
/// Style files larger than this are refused.
const MAX_STYLE_BYTES: u64 = 1024 * 1024;

/// An opaque 8-bit sRGB colour, written `"#RRGGBB"` in a style file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Rgb(pub [u8; 3]);

impl<'de> Deserialize<'de> for Rgb {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let s = String::deserialize(d)?;
        parse_hex(&s).map(Rgb).ok_or_else(|| {
            serde::de::Error::custom(format!("{s:?} is not a colour like \"#1E2328\""))
        })
    }
}

fn parse_hex(s: &str) -> Option<[u8; 3]> {
    let hex = s.trim().strip_prefix('#')?;
    if hex.len() != 6 || !hex.bytes().all(|b| b.is_ascii_hexdigit()) {
        return None;
    }
    let byte = |i: usize| u8::from_str_radix(hex.get(i..i + 2)?, 16).ok();
    Some([byte(0)?, byte(2)?, byte(4)?])
}

impl<'de> Deserialize<'de> for Colormap {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let s = String::deserialize(d)?;
        s.parse().map_err(serde::de::Error::custom)
    }
}

/// Which colour maps the cells use.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Maps {
    /// Counts and scores: one of [`Colormap::ALL`].
    pub sequential: Colormap,
    /// Observed versus expected: one of [`Colormap::DIVERGING`].
    pub diverging: Colormap,
}

/// Backdrop and text colours.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Colours {
    /// Page around the map.
    pub paper: Rgb,
    /// Water, when a land layer is given.
    pub water: Rgb,
    /// Land.
    pub land: Rgb,
    /// Map background without a land layer.
    pub plain: Rgb,
    /// Coastline stroke.
    pub coast: Rgb,
    /// Frame around the map.
    pub frame: Rgb,
    /// Title text.
    pub ink: Rgb,
    /// Subtitle, legend caption, breaks, scale bar.
    pub ink_soft: Rgb,
    /// Attribution and tick marks.
    pub ink_quiet: Rgb,
}

/// How cells are filled and outlined.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Cells {
    /// Fill opacity, 0-1.
    pub opacity: f32,
    /// Thin outline width (pixels at 1200 px wide).
    pub outline_width: f64,
    /// The outline is the fill colour times this, 0-1.
    pub outline_darken: f64,
    /// Cells smaller than this many pixels across get no thin outline.
    pub min_outlined_px: f64,
}

/// The outline of outlier cells: a core stroke over a halo.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Outliers {
    /// Core stroke colour.
    pub colour: Rgb,
    /// Halo colour.
    pub halo: Rgb,
    /// Core width (pixels at 1200 px wide).
    pub width: f64,
    /// Halo width (pixels at 1200 px wide).
    pub halo_width: f64,
}

/// Main roads from the snapshot as faint context.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Roads {
    /// Whether to read and draw them.
    pub show: bool,
    /// Line colour.
    pub colour: Rgb,
    /// Line opacity, 0-1.
    pub opacity: f32,
    /// Line width (pixels at 1200 px wide).
    pub width: f64,
}

/// Fonts and type sizes (pixels at 1200 px wide).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Text {
    /// `"builtin"` or a font file, relative to the style file.
    pub regular_font: String,
    /// `"builtin"` or a font file, relative to the style file.
    pub bold_font: String,
    /// Title.
    pub title_size: f64,
    /// Subtitle.
    pub subtitle_size: f64,
    /// Legend caption, scale bar and outlier key.
    pub label_size: f64,
    /// Legend breaks and attribution.
    pub tick_size: f64,
}

/// The TOML document of a style.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
struct StyleFile {
    name: String,
    description: String,
    maps: Maps,
    colours: Colours,
    cells: Cells,
    outliers: Outliers,
    roads: Roads,
    text: Text,
}

/// A map style, ready to draw with.
#[derive(Debug, Clone)]
pub struct Style {
    /// Its name.
    pub name: String,
    /// One line saying what it is for.
    pub description: String,
    /// Colour maps.
    pub maps: Maps,
    /// Backdrop and text colours.
    pub colours: Colours,
    /// Cell fills and outlines.
    pub cells: Cells,
    /// Outlier outlines.
    pub outliers: Outliers,
    /// Road context.
    pub roads: Roads,
    /// Fonts and sizes.
    pub text: Text,
    /// The regular face, loaded.
    pub(super) regular: FontArc,
    /// The bold face, loaded.
    pub(super) bold: FontArc,
}

/// Errors reading a style.
#[derive(Debug, thiserror::Error)]
pub enum StyleError {
    /// Neither a built-in style name nor a readable file.
    #[error("{given}: no such style; built-in styles are {builtin}, anything else is read as a TOML file ({source})")]
    NotFound {
        /// What was asked for.
        given: String,
        /// The built-in names.
        builtin: String,
        /// Why the file could not be read.
        source: std::io::Error,
    },
    /// The file is larger than a style can be.
    #[error("{path}: a style file of {bytes} bytes is over the limit of {max} bytes")]
    TooLarge {
        /// The file.
        path: PathBuf,
        /// Its size.
        bytes: u64,
        /// The limit.
        max: u64,
    },
    /// TOML syntax error, at a line and column.
    #[error("{path}:{line}:{column}: {message}")]
    Syntax {
        /// The file (or `builtin:NAME`).
        path: PathBuf,
        /// 1-based line.
        line: usize,
        /// 1-based column (characters).
        column: usize,
        /// What is wrong.
        message: String,
    },
    /// A key is unknown, missing, of the wrong type or out of range.
    #[error("{path}: {message}")]
    Invalid {
        /// The file (or `builtin:NAME`).
        path: PathBuf,
        /// What is wrong, naming the key.
        message: String,
    },
    /// A font file could not be read or parsed.
    #[error("{path}: cannot use font file {font}: {message}")]
    Font {
        /// The style file.
        path: PathBuf,
        /// The font file.
        font: PathBuf,
        /// What is wrong.
        message: String,
    },
}

impl Default for Style {
    /// The built-in `default` style.
    fn default() -> Self {
        #[allow(
            clippy::expect_used,
            reason = "the embedded default style is a constant, parsed by a unit test"
        )]
        Self::builtin("default")
            .and_then(Result::ok)
            .expect("the embedded default style parses")
    }
}

impl Style {
    /// Names of the built-in styles.
    #[must_use]
    pub fn builtin_names() -> Vec<&'static str> {
        BUILTIN.iter().map(|(n, _)| *n).collect()
    }

    /// A built-in style by name, or `None` when there is none of that name.
    ///
    /// # Errors
    /// Only if an embedded style is broken (a unit test parses every one).
    pub fn builtin(name: &str) -> Option<Result<Self, StyleError>> {
        let (n, text) = BUILTIN.iter().find(|(n, _)| n.eq_ignore_ascii_case(name))?;
        Some(Self::from_toml(
            text,
            &PathBuf::from(format!("builtin:{n}")),
            None,
        ))
    }

    /// `--style NAME|FILE`: a built-in style by name, else a TOML file.
    ///
    /// # Errors
    /// [`StyleError`] naming the file and, for syntax errors, the line and column.
    pub fn load(name_or_file: &str) -> Result<Self, StyleError> {
        if let Some(style) = Self::builtin(name_or_file) {
            return style;
        }
        let path = Path::new(name_or_file);
        let not_found = |source| StyleError::NotFound {
            given: name_or_file.to_owned(),
            builtin: Self::builtin_names().join(", "),
            source,
        };
        let bytes = std::fs::metadata(path).map_err(not_found)?.len();
        if bytes > MAX_STYLE_BYTES {
            return Err(StyleError::TooLarge {
                path: path.to_owned(),
                bytes,
                max: MAX_STYLE_BYTES,
            });
        }
        let text = std::fs::read_to_string(path).map_err(not_found)?;
        Self::from_toml(&text, path, path.parent())
    }

    /// Parses a style from TOML text merged over its base; `path` names it in errors and
    /// `dir` resolves relative font files (`None`: font files are not allowed).
    ///
    /// # Errors
    /// [`StyleError`] for syntax errors, unknown or invalid keys, and unusable fonts.
    pub fn from_toml(text: &str, path: &Path, dir: Option<&Path>) -> Result<Self, StyleError> {
        let own = parse_table(text, path)?;
        let invalid = |message: String| StyleError::Invalid {
            path: path.to_owned(),
            message,
        };
        let is_default = path == Path::new("builtin:default");
        let merged = if is_default {
            own
        } else {
            let base_name = match own.get("extends") {
                None => "default".to_owned(),
                Some(toml::Value::String(s)) => s.clone(),
                Some(_) => {
                    return Err(invalid(
                        "`extends` must be a built-in style name".to_owned(),
                    ))
                }
            };
            let (base_path, base_text) = BUILTIN
                .iter()
                .find(|(n, _)| n.eq_ignore_ascii_case(&base_name))
                .map(|(n, t)| (PathBuf::from(format!("builtin:{n}")), *t))
                .ok_or_else(|| {
                    invalid(format!(
                        "`extends = {base_name:?}`: not a built-in style ({})",
                        Self::builtin_names().join(", ")
                    ))
                })?;
            let mut base = parse_table(base_text, &base_path)?;
            if base_path != Path::new("builtin:default") {
                let mut default = parse_table(BUILTIN[0].1, Path::new("builtin:default"))?;
                merge(&mut default, base);
                base = default;
            }
            merge(&mut base, own);
            base
        };
        let mut merged = merged;
        // `extends` names the base (read above); it is not part of the merged style.
        merged.remove("extends");
        let file: StyleFile = toml::Value::Table(merged)
            .try_into()
            .map_err(|e: toml::de::Error| invalid(e.message().to_owned()))?;
        validate(&file).map_err(invalid)?;
        let font = |spec: &str, builtin: &'static [u8]| -> Result<FontArc, StyleError> {
            if spec == "builtin" {
                return FontArc::try_from_slice(builtin).map_err(|e| StyleError::Font {
                    path: path.to_owned(),
                    font: PathBuf::from("builtin"),
                    message: e.to_string(),
                });
            }
            let font_path = match dir {
                Some(d) => d.join(spec),
                None => PathBuf::from(spec),
            };
            let font_err = |message: String| StyleError::Font {
                path: path.to_owned(),
                font: font_path.clone(),
                message,
            };
            if dir.is_none() {
                return Err(font_err(
                    "a built-in style cannot name a font file".to_owned(),
                ));
            }
            let size = std::fs::metadata(&font_path)
                .map_err(|e| font_err(e.to_string()))?
                .len();
            if size > MAX_FONT_BYTES {
                return Err(font_err(format!(
                    "{size} bytes is over the limit of {MAX_FONT_BYTES}"
                )));
            }
            let data = std::fs::read(&font_path).map_err(|e| font_err(e.to_string()))?;
            FontArc::try_from_vec(data).map_err(|e| font_err(e.to_string()))
        };
        let regular = font(&file.text.regular_font, REGULAR)?;
        let bold = font(&file.text.bold_font, BOLD)?;
        Ok(Self {
            name: file.name,
            description: file.description,
            maps: file.maps,
            colours: file.colours,
            cells: file.cells,
            outliers: file.outliers,
            roads: file.roads,
            text: file.text,
            regular,
            bold,
        })
    }
}

/// Parses TOML into a table, turning syntax errors into line and column.
fn parse_table(text: &str, path: &Path) -> Result<toml::Table, StyleError> {
    text.parse::<toml::Table>().map_err(|e| {
        let offset = e.span().map_or(0, |s| s.start);
        let (line, column) = line_column(text, offset);
        StyleError::Syntax {
            path: path.to_owned(),
            line,
            column,
            message: e.message().trim().to_owned(),
        }
    })
}

/// 1-based line and character column of a byte offset.
fn line_column(text: &str, offset: usize) -> (usize, usize) {
    let before = text.get(..offset.min(text.len())).unwrap_or(text);
    let line = before.matches('\n').count() + 1;
    let column = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
    (line, column)
}

/// Merges `over` into `base`: tables key by key, everything else replaced.
fn merge(base: &mut toml::Table, over: toml::Table) {
    for (k, v) in over {
        match (base.get_mut(&k), v) {
            (Some(toml::Value::Table(b)), toml::Value::Table(o)) => merge(b, o),
            (_, v) => {
                base.insert(k, v);
            }
        }
    }
}

/// Range checks, so no style can make an unreadable or broken image.
fn validate(f: &StyleFile) -> Result<(), String> {
    if f.maps.sequential.is_diverging() {
        return Err(format!(
            "maps.sequential = {:?} is a diverging map; use one of {}",
            f.maps.sequential.name(),
            names(&Colormap::ALL)
        ));
    }
    if !f.maps.diverging.is_diverging() {
        return Err(format!(
            "maps.diverging = {:?} is not a diverging map; use one of {}",
            f.maps.diverging.name(),
            names(&Colormap::DIVERGING)
        ));
    }
    let ranges: [(&str, f64, f64, f64); 13] = [
        ("cells.opacity", f64::from(f.cells.opacity), 0.05, 1.0),
        ("cells.outline_width", f.cells.outline_width, 0.0, 4.0),
        ("cells.outline_darken", f.cells.outline_darken, 0.0, 1.0),
        ("cells.min_outlined_px", f.cells.min_outlined_px, 0.0, 100.0),
        ("outliers.width", f.outliers.width, 1.0, 8.0),
        ("outliers.halo_width", f.outliers.halo_width, 0.0, 14.0),
        ("roads.opacity", f64::from(f.roads.opacity), 0.0, 1.0),
        ("roads.width", f.roads.width, 0.2, 6.0),
        // Sizes that still fit the fixed header and footer of the layout.
        ("text.title_size", f.text.title_size, 16.0, 48.0),
        ("text.subtitle_size", f.text.subtitle_size, 10.0, 26.0),
        ("text.label_size", f.text.label_size, 10.0, 22.0),
        ("text.tick_size", f.text.tick_size, 9.0, 20.0),
        (
            "outliers.halo_width - outliers.width",
            f.outliers.halo_width - f.outliers.width,
            0.0,
            10.0,
        ),
    ];
    for (key, v, lo, hi) in ranges {
        if !(v.is_finite() && (lo..=hi).contains(&v)) {
            return Err(format!("{key} = {v} is outside {lo}..{hi}"));
        }
    }
    Ok(())
}

fn names(maps: &[Colormap]) -> String {
    maps.iter().map(|m| m.name()).collect::<Vec<_>>().join(", ")
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "constant test inputs")]
mod tests {
    use super::*;

    #[test]
    fn every_builtin_style_parses() {
        for name in Style::builtin_names() {
            let s = Style::builtin(name).unwrap().unwrap();
            assert_eq!(s.name, name);
        }
        let d = Style::default();
        assert_eq!(d.maps.sequential, Colormap::Viridis);
        assert_eq!(d.maps.diverging, Colormap::RdBuR);
        // Partial styles inherit the rest from the default.
        let dark = Style::builtin("dark").unwrap().unwrap();
        assert_eq!(dark.maps.sequential, Colormap::Magma);
        assert_eq!(dark.maps.diverging, Colormap::RdBuR);
        assert_eq!(dark.text.title_size, d.text.title_size);
        assert_ne!(dark.colours.paper, d.colours.paper);
    }

    #[test]
    fn a_partial_file_merges_over_its_base() {
        let s = Style::from_toml(
            "name = \"mine\"\nextends = \"print\"\n[colours]\nland = \"#102030\"\n",
            Path::new("mine.toml"),
            Some(Path::new(".")),
        )
        .unwrap();
        assert_eq!(s.colours.land, Rgb([0x10, 0x20, 0x30]));
        assert_eq!(s.maps.sequential, Colormap::Cividis, "from print");
        assert_eq!(s.cells.outline_width, Style::default().cells.outline_width);
    }

    #[test]
    fn bad_styles_fail_with_file_and_position() {
        let e = Style::from_toml("name = \"x\"\n[colours\n", Path::new("x.toml"), None)
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("x.toml:2:"), "{e}");
        let e = Style::from_toml("[colours]\nlnad = \"#000000\"\n", Path::new("x.toml"), None)
            .unwrap_err()
            .to_string();
        assert!(e.contains("lnad"), "{e}");
        let e = Style::from_toml("[colours]\nland = \"green\"\n", Path::new("x.toml"), None)
            .unwrap_err()
            .to_string();
        assert!(e.contains("green"), "{e}");
        let e = Style::from_toml(
            "[maps]\nsequential = \"rdbu_r\"\n",
            Path::new("x.toml"),
            None,
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("diverging"), "{e}");
        let e = Style::from_toml("[text]\ntitle_size = 400.0\n", Path::new("x.toml"), None)
            .unwrap_err()
            .to_string();
        assert!(e.contains("text.title_size"), "{e}");
        let e = Style::from_toml(
            "[text]\nregular_font = \"missing.ttf\"\n",
            Path::new("x.toml"),
            Some(Path::new("/nonexistent")),
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("missing.ttf"), "{e}");
        assert!(Style::load("no-such-style").is_err());
    }

    #[test]
    fn line_and_column_count_characters() {
        assert_eq!(line_column("ab\ncdé\nf", 0), (1, 1));
        assert_eq!(line_column("ab\ncdé\nf", 3), (2, 1));
        // "é" is two bytes: the newline after it is byte 7, character column 4.
        assert_eq!(line_column("ab\ncdé\nf", 7), (2, 4));
        assert_eq!(line_column("ab\ncdé\nf", 8), (3, 1));
        assert_eq!(parse_hex("#0aFf10"), Some([0x0A, 0xFF, 0x10]));
        assert_eq!(parse_hex("0aff10"), None);
        assert_eq!(parse_hex("#0aff1"), None);
    }
}
