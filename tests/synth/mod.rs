//! Integration tests: synth.

mod dynamics;
mod physics;
