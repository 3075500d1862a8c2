//! Integration tests: synth.

mod demo;
mod dynamics;
mod facts;
mod field;
mod physics;
mod regions;
