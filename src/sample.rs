//! sample (placeholder, see its issue).
