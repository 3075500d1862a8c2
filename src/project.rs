//! project (placeholder, see its issue).
