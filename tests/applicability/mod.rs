//! Integration tests: the area of applicability (reason codes, the ground check, the well-free
//! lobe of a generated field).

mod lobe;
mod reasons;
