//! Pieces of HTML markup every part of the review page uses: escaping, number formats, "not
//! computed", and figures from PNG bytes (checked to decode, embedded as data URIs).

use std::fmt::Write as _;

use base64::Engine;

use super::ReportError;

/// What the page writes for a missing figure.
pub const NOT_COMPUTED: &str = "<span class=\"nc\">not computed</span>";

/// Escapes text for HTML content and attribute values.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
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

/// Formats a number with about three significant digits; `None` and non-finite values read
/// "not computed".
pub fn num(v: Option<f64>) -> String {
    match v {
        Some(x) if x.is_finite() => format_sig(x),
        _ => NOT_COMPUTED.to_string(),
    }
}

/// Formats a finite number with about three significant digits.
pub fn format_sig(x: f64) -> String {
    if x == 0.0 {
        return "0".to_string();
    }
    let mag = x.abs().log10().floor();
    let decimals = (2.0 - mag).clamp(0.0, 6.0) as usize;
    let s = format!("{x:.decimals$}");
    if s.trim_start_matches('-')
        .chars()
        .all(|c| c == '0' || c == '.')
    {
        format!("{x:.2e}")
    } else {
        s
    }
}

/// Formats a fraction as a percentage with one decimal.
pub fn pct(v: Option<f64>) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{:.1}&nbsp;%", x * 100.0),
        _ => NOT_COMPUTED.to_string(),
    }
}

/// " (unit)" for a table heading, escaped; empty for no unit.
pub fn unit_suffix(unit: &str) -> String {
    if unit.is_empty() {
        String::new()
    } else {
        format!(" ({})", escape(unit))
    }
}

/// A PNG as a `data:` URI.
pub fn data_uri(png: &[u8]) -> String {
    format!(
        "data:image/png;base64,{}",
        base64::engine::general_purpose::STANDARD.encode(png)
    )
}

/// Checks that `bytes` are a PNG that decodes to a non-empty image.
pub fn check_png(bytes: &[u8]) -> Result<(u32, u32), String> {
    let decoder = png::Decoder::new(std::io::Cursor::new(bytes));
    let reader = decoder
        .read_info()
        .map_err(|e| format!("not a readable PNG ({e})"))?;
    let info = reader.info();
    if info.width == 0 || info.height == 0 {
        return Err("empty PNG".to_string());
    }
    Ok((info.width, info.height))
}

/// A figure from PNG bytes, or a note saying why there is none.
pub fn figure_png(png: Result<Vec<u8>, String>, alt: &str, caption: &str) -> String {
    match png.and_then(|b| check_png(&b).map(|_| b)) {
        Ok(bytes) => {
            let mut s = format!(
                "<figure><img src=\"{}\" alt=\"{}\">",
                data_uri(&bytes),
                escape(alt)
            );
            if !caption.is_empty() {
                let _ = write!(s, "<figcaption>{}</figcaption>", escape(caption));
            }
            s.push_str("</figure>");
            s
        }
        Err(why) => format!(
            "<figure><p class=\"nc\">{}: picture not available ({}).</p></figure>",
            escape(alt),
            escape(&why)
        ),
    }
}

/// A drawing result with its error as text.
pub fn drawn(r: Result<Vec<u8>, ReportError>) -> Result<Vec<u8>, String> {
    r.map_err(|e| e.to_string())
}
