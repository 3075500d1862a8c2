//! Runs a closure on a fresh rayon pool of a given size: the tests that check "same seed, same
//! numbers, whatever the thread count" share it.

/// Runs `f` inside a new pool of `threads` threads and returns its result.
pub fn in_pool<T: Send>(threads: usize, f: impl FnOnce() -> T + Send) -> T {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .expect("a rayon pool")
        .install(f)
}
