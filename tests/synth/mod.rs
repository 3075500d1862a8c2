//! Integration tests: synth.

mod dynamics;
mod facts;
mod field;
mod physics;
