//! io (placeholder, see its issue).
