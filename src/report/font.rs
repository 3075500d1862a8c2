//! The embedded typeface. DejaVu Sans (regular and bold, Bitstream Vera licence with public-domain
//! DejaVu changes; see `assets/fonts/LICENSE-DejaVu`) is compiled into the binary and registered with
//! plotters' ab_glyph text renderer, so pictures never depend on the fonts installed on a machine.

use std::sync::OnceLock;

use plotters::style::FontStyle;

use super::ReportError;

/// DejaVu Sans, regular.
static DEJAVU_SANS: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans.ttf");
/// DejaVu Sans, bold.
static DEJAVU_SANS_BOLD: &[u8] = include_bytes!("../../assets/fonts/DejaVuSans-Bold.ttf");

/// The family name pictures ask for. plotters' own defaults ask for "sans-serif", which is
/// registered with the same face.
pub const FAMILY: &str = "sans-serif";

static REGISTERED: OnceLock<bool> = OnceLock::new();

/// Registers the embedded faces with plotters (once per process).
pub fn ensure_registered() -> Result<(), ReportError> {
    let ok = *REGISTERED.get_or_init(|| {
        let mut ok = true;
        for name in [FAMILY, "serif", "monospace", "DejaVu Sans"] {
            ok &= plotters::style::register_font(name, FontStyle::Normal, DEJAVU_SANS).is_ok();
            ok &= plotters::style::register_font(name, FontStyle::Bold, DEJAVU_SANS_BOLD).is_ok();
        }
        ok
    });
    if ok { Ok(()) } else { Err(ReportError::Font) }
}
