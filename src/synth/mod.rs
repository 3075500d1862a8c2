//! synth (placeholder, see its issue).
