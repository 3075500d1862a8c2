//! Integration tests: report.
