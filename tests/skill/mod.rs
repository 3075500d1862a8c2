//! Integration tests: skill at held-out wells (CRPS of weighted samples, climatology, the
//! well bootstrap and the verdict).

mod bootstrap;
mod crps;
mod verdict;
