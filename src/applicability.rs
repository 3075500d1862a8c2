//! applicability (placeholder, see its issue).
