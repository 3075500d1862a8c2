//! Integration tests: report (colour maps, pictures, HTML page, headless-browser check).

mod browser;
mod colormap;
mod fixture;
mod html;
mod picture;
