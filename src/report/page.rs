//! The parts every report page shares: the document head (inline style sheet, a strict content
//! security policy), the cautions every reader must see before any flag, and the footer with
//! the data attribution and the generator line.

use std::fmt::Write as _;

use sha2::{Digest, Sha256};

use super::text::escape_html;
use super::PageContext;

/// The report's style sheet, inlined into every page.
pub(super) const STYLE: &str = include_str!("../../styles/report.css");
/// The changeset table's sorting and filtering script, inlined into region pages.
pub(super) const TABLE_SCRIPT: &str = include_str!("table.js");

/// Standard base64 (RFC 4648 §4, with padding), for CSP source hashes.
fn base64(bytes: &[u8]) -> String {
    const ALPHABET: &[u8; 64] = b"ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789+/";
    let mut out = String::with_capacity(bytes.len().div_ceil(3) * 4);
    for chunk in bytes.chunks(3) {
        let b = [
            chunk[0],
            chunk.get(1).copied().unwrap_or(0),
            chunk.get(2).copied().unwrap_or(0),
        ];
        let n = u32::from(b[0]) << 16 | u32::from(b[1]) << 8 | u32::from(b[2]);
        for (i, shift) in [18, 12, 6, 0].into_iter().enumerate() {
            if i <= chunk.len() {
                out.push(char::from(ALPHABET[(n >> shift & 63) as usize]));
            } else {
                out.push('=');
            }
        }
    }
    out
}

/// A CSP source expression allowing exactly this inline text.
pub(crate) fn csp_hash(text: &str) -> String {
    format!("'sha256-{}'", base64(&Sha256::digest(text.as_bytes())))
}

/// Starts a page: doctype, head and the opening `<body>`.
///
/// The content security policy allows only the page's own inline style sheet and (when
/// `with_script`) its own table script, by hash, plus images from the report folder. Even if
/// some OSM text escaped escaping, an injected script, style or network request would not run.
pub(super) fn open(out: &mut String, title: &str, with_script: bool) {
    let script_src = if with_script {
        csp_hash(TABLE_SCRIPT)
    } else {
        "'none'".to_owned()
    };
    let _ = write!(
        out,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
         <meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; \
         img-src 'self' data:; style-src {style}; script-src {script_src}; base-uri 'none'; \
         form-action 'none'\">\n\
         <meta name=\"referrer\" content=\"no-referrer\">\n\
         <meta name=\"color-scheme\" content=\"light\">\n\
         <title>{title}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n",
        style = csp_hash(STYLE),
        title = escape_html(title),
    );
}

/// Closes a page, adding the table script when asked.
pub(super) fn close(out: &mut String, with_script: bool) {
    if with_script {
        let _ = writeln!(out, "<script>{TABLE_SCRIPT}</script>");
    }
    out.push_str("</body>\n</html>\n");
}

/// The full cautions box of a region page, placed before any list of flagged things.
pub(super) fn cautions_full(out: &mut String) {
    out.push_str(
        "<aside class=\"cautions\" id=\"before-you-act\" aria-labelledby=\"cautions-h\">\n\
         <h2 id=\"cautions-h\">Before you act on anything below</h2>\n<ul>\n\
         <li><strong>A flag is a statistical prompt for a human reviewer, not a verdict.</strong> \
         It is not proof that anyone acted in bad faith.</li>\n\
         <li><strong>Look at the edits yourself</strong> before drawing any conclusion. Unusual \
         weeks often have ordinary causes: an import, a mapping party, a school project, a \
         clean-up of old data.</li>\n\
         <li><strong>Assume good faith and talk to the mapper first</strong>, for example with \
         a friendly changeset comment or a message, and give them time to answer.</li>\n\
         <li><strong>Follow the guidelines on reverts and disputes</strong> of your local \
         community and of the OpenStreetMap Foundation.</li>\n\
         <li><strong>Being new is context, never a reason to treat someone badly.</strong> \
         Newcomers are how the map grows; a kind word helps more than a revert.</li>\n\
         </ul>\n</aside>\n",
    );
}

/// The short cautions of the index page.
pub(super) fn cautions_brief(out: &mut String) {
    out.push_str(
        "<aside class=\"cautions\" aria-labelledby=\"cautions-h\">\n\
         <h2 id=\"cautions-h\">Before you act</h2>\n\
         <p>Flags and outlier cells are <strong>statistical prompts for a human reviewer, not \
         verdicts or proof of bad faith</strong>. Look at the edits yourself, assume good faith \
         and talk to the mapper first. Follow your local community's and the OpenStreetMap \
         Foundation's guidelines on reverts and disputes. Being new to OpenStreetMap is context, \
         never a reason to treat anyone badly.</p>\n</aside>\n",
    );
}

/// The page footer: data attribution and the generator line.
pub(super) fn footer(out: &mut String, ctx: &PageContext<'_>) {
    let _ = write!(
        out,
        "<footer class=\"page-footer\">\n<p>Map data © \
         <a href=\"https://www.openstreetmap.org/copyright\">OpenStreetMap contributors</a>, \
         available under the Open Database License (ODbL).</p>\n\
         <p>Generated by hexvigil {version} on {at}.</p>\n</footer>\n",
        version = escape_html(ctx.tool_version),
        at = escape_html(ctx.generated_at),
    );
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn base64_matches_rfc4648_vectors() {
        // Source: RFC 4648 §10 test vectors.
        for (input, expected) in [
            ("", ""),
            ("f", "Zg=="),
            ("fo", "Zm8="),
            ("foo", "Zm9v"),
            ("foob", "Zm9vYg=="),
            ("fooba", "Zm9vYmE="),
            ("foobar", "Zm9vYmFy"),
        ] {
            assert_eq!(base64(input.as_bytes()), expected);
        }
    }

    /// `#rrggbb` → relative luminance.
    // Source: WCAG 2.x, definition of relative luminance
    // (https://www.w3.org/TR/WCAG21/#dfn-relative-luminance), with the sRGB threshold 0.04045.
    fn relative_luminance(hex: &str) -> f64 {
        let hex = hex.trim_start_matches('#');
        assert_eq!(hex.len(), 6, "colour {hex} is not #rrggbb");
        let channel = |i: usize| {
            let c = f64::from(u8::from_str_radix(&hex[i..i + 2], 16).unwrap_or_else(|e| {
                panic!("colour {hex}: {e}");
            })) / 255.0;
            if c <= 0.04045 {
                c / 12.92
            } else {
                ((c + 0.055) / 1.055).powf(2.4)
            }
        };
        0.2126 * channel(0) + 0.7152 * channel(2) + 0.0722 * channel(4)
    }

    // Source: WCAG 2.x, definition of contrast ratio (L1 + 0.05) / (L2 + 0.05)
    // (https://www.w3.org/TR/WCAG21/#dfn-contrast-ratio).
    fn contrast(a: &str, b: &str) -> f64 {
        let (la, lb) = (relative_luminance(a), relative_luminance(b));
        (la.max(lb) + 0.05) / (la.min(lb) + 0.05)
    }

    /// The `--name: #rrggbb;` custom properties of the style sheet's `:root` block, and the rest
    /// of the sheet.
    fn palette() -> (Vec<(String, String)>, &'static str) {
        let start = STYLE.find(":root {").expect(":root block");
        let len = STYLE[start..].find('}').expect("end of :root");
        let vars = STYLE[start..start + len]
            .lines()
            .filter_map(|l| {
                let (name, value) = l.trim().strip_prefix("--")?.split_once(':')?;
                let value = value.trim().trim_end_matches(';');
                value
                    .starts_with('#')
                    .then(|| (name.to_owned(), value.to_owned()))
            })
            .collect();
        (vars, &STYLE[start + len..])
    }

    #[test]
    fn contrast_formula_matches_published_values() {
        // Source: WCAG 2.x contrast ratio definition: black on white is 21:1, a colour on
        // itself 1:1.
        assert!((contrast("#000000", "#ffffff") - 21.0).abs() < 1e-9);
        assert!((contrast("#56626e", "#56626e") - 1.0).abs() < 1e-12);
        // From memory (widely cited, e.g. by WebAIM): #767676 is the lightest grey with at
        // least 4.5:1 on white (4.54:1); #777777 falls just short (4.48:1).
        assert!((contrast("#767676", "#ffffff") - 4.54).abs() < 0.005);
        assert!(contrast("#777777", "#ffffff") < 4.5);
    }

    #[test]
    fn palette_meets_wcag_aa_contrast() {
        let (vars, rest) = palette();
        let colour = |name: &str| -> &str {
            vars.iter()
                .find(|(n, _)| n == name)
                .map(|(_, v)| v.as_str())
                .unwrap_or_else(|| panic!("--{name} is not a colour in :root"))
        };
        // WCAG 2.x success criterion 1.4.3: text at least 4.5:1 against its background.
        let text = [
            ("ink", "bg"),
            ("ink", "surface"),
            ("ink", "note-bg"),
            ("ink", "flag-soft"),
            ("ink", "head-bg"),
            ("ink", "accent-soft"),
            ("ink", "usual"),
            ("muted", "bg"),
            ("muted", "surface"),
            ("muted", "head-bg"),
            ("muted", "flag-soft"),
            ("muted", "note-bg"),
            ("muted", "usual"),
            ("accent", "bg"),
            ("accent", "surface"),
            ("accent", "flag-soft"),
            ("flag", "bg"),
            ("flag", "surface"),
            ("flag", "flag-soft"),
        ];
        // Success criterion 1.4.11: graphics a reader needs (chart lines and dots, the dashed
        // mean, the focus ring, form control borders, the flagged-row stripe) at least 3:1.
        let graphics = [
            ("edits", "surface"),
            ("deletes", "surface"),
            ("newcomers", "surface"),
            ("edits", "usual"),
            ("deletes", "usual"),
            ("newcomers", "usual"),
            ("edits", "accent-soft"),
            ("deletes", "accent-soft"),
            ("newcomers", "accent-soft"),
            ("usual-mean", "surface"),
            ("usual-mean", "usual"),
            ("focus", "bg"),
            ("focus", "surface"),
            ("focus", "flag-soft"),
            ("control-line", "surface"),
            ("flag", "flag-soft"),
        ];
        let mut failures = Vec::new();
        for (pairs, minimum) in [(&text[..], 4.5), (&graphics[..], 3.0)] {
            for (fg, bg) in pairs {
                let ratio = contrast(colour(fg), colour(bg));
                if ratio < minimum {
                    failures.push(format!("--{fg} on --{bg}: {ratio:.2} < {minimum}"));
                }
            }
        }
        assert!(failures.is_empty(), "{failures:#?}");

        // Every colour lives in :root, so the pairs above cover the sheet: no literal colour
        // (#rgb, #rrggbb, rgb(), hsl()) after it.
        let bytes = rest.as_bytes();
        for (i, _) in rest.match_indices('#') {
            let digits = bytes[i + 1..]
                .iter()
                .take_while(|b| b.is_ascii_alphanumeric() || **b == b'-' || **b == b'_')
                .count();
            let word = &rest[i + 1..i + 1 + digits];
            let is_colour =
                matches!(word.len(), 3 | 4 | 6 | 8) && word.bytes().all(|b| b.is_ascii_hexdigit());
            assert!(!is_colour, "literal colour #{word} outside :root");
        }
        for f in ["rgb(", "rgba(", "hsl(", "hsla("] {
            assert!(!rest.contains(f), "literal colour {f} outside :root");
        }
    }
}
