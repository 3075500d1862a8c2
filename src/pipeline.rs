//! pipeline (placeholder, see its issue).
