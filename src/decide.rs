//! decide (placeholder, see its issue).
