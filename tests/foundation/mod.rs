//! Integration tests: foundation.
