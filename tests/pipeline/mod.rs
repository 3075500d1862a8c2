//! Integration tests: pipeline.
