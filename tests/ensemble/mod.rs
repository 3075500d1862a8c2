//! Integration tests: ensemble.
