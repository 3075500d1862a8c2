//! Integration tests: the area of applicability (reason codes, the ground check, the well-free
//! lobe of a generated field, the area as the main job writes it, outlines the user marks).

mod area;
mod lobe;
mod outline;
mod reasons;
