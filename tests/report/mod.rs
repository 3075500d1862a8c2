//! Integration tests: report (colour maps, pictures, HTML page, headless-browser check).

pub(crate) mod browser;
mod colormap;
mod fixture;
pub(crate) mod html;
mod kinds;
mod picture;
mod verdicts;
