//! Explicit parallelism and progress reporting for long loops.
//!
//! Every parallel routine takes a [`Threads`] value instead of relying on a hidden global,
//! and results never depend on it. Long routines call a [`Monitor`] between chunks of work
//! from the calling thread, which lets the Python layer advance a progress bar and notice
//! Ctrl-C within a fraction of a second.

use crate::error::{Error, Result};

/// How many threads a routine may use.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Threads {
    /// rayon's global pool (sized by `RAYON_NUM_THREADS`, else the number of cores).
    #[default]
    Global,
    /// A dedicated pool of this many threads (at least 1).
    Fixed(usize),
}

impl Threads {
    /// `None` → the global pool, `Some(k)` → `k` threads.
    pub fn from_option(threads: Option<usize>) -> Result<Self> {
        match threads {
            None => Ok(Threads::Global),
            Some(0) => Err(Error::value(
                "n_jobs",
                "must be at least 1 (or None for all cores)",
            )),
            Some(k) => Ok(Threads::Fixed(k)),
        }
    }

    /// Starts the pool (a no-op for the global one).
    ///
    /// # Errors
    /// `n_jobs` if the operating system refuses the threads.
    pub fn pool(self) -> Result<Pool> {
        match self {
            Threads::Global => Ok(Pool::Global),
            Threads::Fixed(k) => rayon::ThreadPoolBuilder::new()
                .num_threads(k)
                .build()
                .map(Pool::Owned)
                .map_err(|e| Error::value("n_jobs", format!("cannot start {k} threads: {e}"))),
        }
    }
}

/// A started pool. Long loops call [`Pool::run`] once per chunk, so the loop itself (and
/// its [`Monitor`] calls) stays on the calling thread, where Python can see Ctrl-C.
#[derive(Debug)]
pub enum Pool {
    Global,
    Owned(rayon::ThreadPool),
}

impl Pool {
    /// Runs parallel `work` on this pool's threads.
    pub fn run<R: Send>(&self, work: impl FnOnce() -> R + Send) -> R {
        match self {
            Pool::Global => work(),
            Pool::Owned(pool) => pool.install(work),
        }
    }

    /// Number of threads the pool runs on.
    pub fn threads(&self) -> usize {
        match self {
            Pool::Global => rayon::current_num_threads(),
            Pool::Owned(pool) => pool.current_num_threads(),
        }
    }
}

/// Receives progress between chunks of a long loop; returning an error stops the loop.
pub trait Monitor: Sync {
    /// `done` of `total` units finished. Return `Err(Error::Interrupted)` to stop early.
    fn progress(&self, done: usize, total: usize) -> Result<()>;
}

/// A monitor that never stops the work and reports nothing.
#[derive(Debug, Clone, Copy, Default)]
pub struct Silent;

impl Monitor for Silent {
    fn progress(&self, _done: usize, _total: usize) -> Result<()> {
        Ok(())
    }
}
