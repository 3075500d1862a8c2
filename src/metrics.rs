//! metrics (placeholder, see its issue).
