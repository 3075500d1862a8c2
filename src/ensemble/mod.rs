//! ensemble (placeholder, see its issue).
