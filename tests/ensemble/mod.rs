//! Integration tests: ensemble (binned trees, forests, quantile forests, gradient boosting).

mod boost;
mod common;
mod determinism;
mod errors;
mod forest;
mod one_pass;
mod persist;
mod quantile;
