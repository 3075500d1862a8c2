//! grid (placeholder, see its issue).
