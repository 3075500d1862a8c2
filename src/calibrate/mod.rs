//! calibrate (placeholder, see its issue).
