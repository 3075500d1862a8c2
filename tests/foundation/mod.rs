//! Integration tests: foundation (grid geometry, readers and writers, manifest, extraction at wells,
//! `tidemark check`).

mod bad_inputs;
mod check;
pub(crate) mod fixtures;
mod fuzz;
mod geotiff;
mod grid;
mod outputs;
mod readers;
mod sample;
mod smooth;
mod xyz;
mod xyz_gdal;
