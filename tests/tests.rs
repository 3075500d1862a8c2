//! Integration tests, compiled as one binary. Each area keeps its tests in its own folder.

mod applicability;
mod architecture;
mod calibrate;
mod ensemble;
mod foundation;
mod pipeline;
mod report;
mod skill;
mod spatial;
mod synth;
mod threads;
