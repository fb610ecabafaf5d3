//! Text helpers shared by the report writers: HTML escaping, URL path-segment encoding, safe
//! folder names, and number formats a reader can take in at a glance.

use std::fmt::Write as _;

/// Longest slug [`slugify`] returns, in bytes (all ASCII).
pub const MAX_SLUG_LEN: usize = 64;

/// Escapes text for HTML element content and for quoted attribute values.
///
/// Replaces `&`, `<`, `>`, `"` and `'` with character references, so the result is safe both
/// between tags and inside `"…"` or `'…'` attributes. Everything else, including all non-ASCII
/// text, passes through unchanged.
#[must_use]
pub fn escape_html(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + s.len() / 8);
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// Percent-encodes one URL path segment (RFC 3986): every byte of the UTF-8 text except the
/// unreserved characters `A–Z a–z 0–9 - . _ ~` becomes `%XX`. A `/` inside a mapper's name thus
/// stays part of the name instead of starting a new path segment.
#[must_use]
pub fn encode_path_segment(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for b in s.bytes() {
        if b.is_ascii_alphanumeric() || matches!(b, b'-' | b'.' | b'_' | b'~') {
            out.push(char::from(b));
        } else {
            let _ = write!(out, "%{b:02X}");
        }
    }
    out
}

/// Percent-encodes a relative path segment by segment, keeping the `/` separators.
#[must_use]
pub fn encode_relative_path(path: &str) -> String {
    path.split('/')
        .map(encode_path_segment)
        .collect::<Vec<_>>()
        .join("/")
}

/// Turns a region name into a safe folder name.
///
/// The result holds only lowercase ASCII letters, digits and single hyphens, never starts or
/// ends with a hyphen, is at most [`MAX_SLUG_LEN`] bytes long and is never empty (`"region"`
/// stands in when nothing usable is left). ASCII letters are lowercased; every other character
/// (punctuation, spaces, dots, slashes and all non-ASCII letters) separates words, so
/// `"São Paulo"` becomes `"s-o-paulo"` and `"../../etc"` becomes `"etc"`. No transliteration
/// is attempted. Because dots never survive, the result can never be `.` or `..`, and it is a
/// fixed point: `slugify(&slugify(x)) == slugify(x)`.
#[must_use]
pub fn slugify(name: &str) -> String {
    let mut out = String::with_capacity(name.len().min(MAX_SLUG_LEN));
    let mut pending_hyphen = false;
    for c in name.chars() {
        if c.is_ascii_alphanumeric() {
            if pending_hyphen && !out.is_empty() {
                if out.len() + 1 >= MAX_SLUG_LEN {
                    break;
                }
                out.push('-');
            }
            pending_hyphen = false;
            if out.len() >= MAX_SLUG_LEN {
                break;
            }
            out.push(c.to_ascii_lowercase());
        } else {
            pending_hyphen = true;
        }
    }
    if out.is_empty() {
        "region".to_owned()
    } else {
        out
    }
}

/// Formats a whole number with thousands separators: `1234567` → `"1,234,567"`.
#[must_use]
pub fn group_thousands(n: u64) -> String {
    let digits = n.to_string();
    let mut out = String::with_capacity(digits.len() + digits.len() / 3);
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i).is_multiple_of(3) {
            out.push(',');
        }
        out.push(c);
    }
    out
}

/// Formats a mean count: one decimal below 100, a grouped whole number from 100 on.
#[must_use]
pub fn format_mean(x: f64) -> String {
    if !x.is_finite() || x < 0.0 {
        "–".to_owned()
    } else if x < 99.95 {
        format!("{x:.1}")
    } else {
        // Rounded and finite and non-negative, so the conversion is exact up to 2^53.
        group_thousands(x.round() as u64)
    }
}

/// Formats a probability for a table: three significant digits from 0.001 up (`0.0123`),
/// scientific notation below (`3.2e-12`), and `< 1e-300` when it underflowed to zero.
#[must_use]
pub fn format_probability(p: f64) -> String {
    if !p.is_finite() || p < 0.0 {
        "–".to_owned()
    } else if p == 0.0 {
        "< 1e-300".to_owned()
    } else if p >= 0.001 {
        let decimals = (2 - p.log10().floor() as i32).clamp(0, 5) as usize;
        let s = format!("{p:.decimals$}");
        if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_owned()
        } else {
            s
        }
    } else {
        format!("{p:.1e}")
    }
}

/// Formats observed ÷ expected as `"12.8×"`; `"new"` when nothing was expected.
#[must_use]
pub fn format_ratio(observed: f64, expected: f64) -> String {
    if !expected.is_finite() || !observed.is_finite() {
        "–".to_owned()
    } else if expected <= 0.0 {
        if observed > 0.0 {
            "new".to_owned()
        } else {
            "–".to_owned()
        }
    } else {
        let r = observed / expected;
        if r >= 100.0 {
            format!("{}×", group_thousands(r.round() as u64))
        } else if r >= 10.0 {
            format!("{r:.0}×")
        } else {
            format!("{r:.1}×")
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_all_five() {
        assert_eq!(
            escape_html(r#"<a href="x" onclick='y'>&</a>"#),
            "&lt;a href=&quot;x&quot; onclick=&#39;y&#39;&gt;&amp;&lt;/a&gt;"
        );
        assert_eq!(escape_html("Zürich 東京"), "Zürich 東京");
    }

    #[test]
    fn path_segments_keep_slashes_inside() {
        assert_eq!(encode_path_segment("a b/c?é"), "a%20b%2Fc%3F%C3%A9");
        assert_eq!(encode_path_segment("Ab-9._~"), "Ab-9._~");
    }

    #[test]
    fn slugs_are_safe() {
        assert_eq!(slugify("São Paulo"), "s-o-paulo");
        assert_eq!(slugify("../../etc"), "etc");
        assert_eq!(slugify(".."), "region");
        assert_eq!(slugify(""), "region");
        assert_eq!(slugify("東京"), "region");
        assert_eq!(slugify("  Old Town -- North  "), "old-town-north");
        let long = slugify(&"ab ".repeat(100));
        assert!(long.len() <= MAX_SLUG_LEN);
        assert!(!long.ends_with('-'));
        for s in ["São Paulo", "x".repeat(200).as_str(), "a-b", "A  B"] {
            assert_eq!(slugify(&slugify(s)), slugify(s));
        }
    }

    #[test]
    fn numbers_read_well() {
        assert_eq!(group_thousands(0), "0");
        assert_eq!(group_thousands(999), "999");
        assert_eq!(group_thousands(1_234_567), "1,234,567");
        assert_eq!(format_mean(12.34), "12.3");
        assert_eq!(format_mean(1234.4), "1,234");
        assert_eq!(format_probability(3.2e-12), "3.2e-12");
        assert_eq!(format_probability(0.012_34), "0.0123");
        assert_eq!(format_probability(0.5), "0.5");
        assert_eq!(format_probability(1.0), "1");
        assert_eq!(format_probability(0.0), "< 1e-300");
        assert_eq!(format_ratio(41.0, 3.2), "13×");
        assert_eq!(format_ratio(5.0, 2.0), "2.5×");
        assert_eq!(format_ratio(3.0, 0.0), "new");
    }
}
