//! Integration tests: synth.
