//! Integration tests: foundation (grid geometry, readers and writers, manifest, extraction at wells,
//! `tidemark check`).

mod bad_inputs;
mod check;
pub(crate) mod fixtures;
mod geotiff;
mod grid;
mod sample;
mod xyz;
mod xyz_gdal;
