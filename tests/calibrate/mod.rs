//! Integration tests: calibrate.
