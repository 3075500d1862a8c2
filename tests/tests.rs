//! Integration tests, compiled as one binary. Each area keeps its tests in its own folder.

mod applicability;
mod calibrate;
mod ensemble;
mod foundation;
mod pipeline;
mod report;
mod skill;
mod synth;
