//! report (placeholder, see its issue).
