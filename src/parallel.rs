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

/// How often [`watched`] reports progress to its monitor (and so how soon Ctrl-C is seen).
pub const HEARTBEAT: std::time::Duration = std::time::Duration::from_millis(100);

/// Shared between a long parallel job and the calling thread that watches it: the job adds
/// the units it finishes and checks [`Watch::stopped`] between blocks of work (never inside
/// the innermost arithmetic), so a stop asked for by the monitor ends it within one block.
#[derive(Debug, Default)]
pub struct Watch {
    stop: std::sync::atomic::AtomicBool,
    done: std::sync::atomic::AtomicUsize,
}

impl Watch {
    /// Whether the monitor asked the job to stop (the job then returns early; its partial
    /// output is discarded by [`watched`]).
    #[inline]
    pub fn stopped(&self) -> bool {
        self.stop.load(std::sync::atomic::Ordering::Relaxed)
    }

    /// The stop flag itself, for work that checks it as a plain flag.
    #[inline]
    pub fn flag(&self) -> &std::sync::atomic::AtomicBool {
        &self.stop
    }

    /// Adds `units` finished units of work.
    #[inline]
    pub fn advance(&self, units: usize) {
        self.done
            .fetch_add(units, std::sync::atomic::Ordering::Relaxed);
    }
}

/// Runs `work` (which may use `pool`'s threads) on a helper thread while the calling thread
/// reports the units done of `total` to `monitor` every [`HEARTBEAT`], and once more,
/// `(total, total)`, when the work has finished. An error from the monitor (Ctrl-C, a
/// raising callback) raises the watch's stop flag, waits for `work` to return and is
/// returned in place of its (partial) result; so the monitor is only ever called from the
/// calling thread, and the work's speed does not depend on how often it is watched.
///
/// # Errors
/// The monitor's error.
pub fn watched<R: Send>(
    pool: &Pool,
    monitor: &dyn Monitor,
    total: usize,
    work: impl FnOnce(&Watch) -> R + Send,
) -> Result<R> {
    let watch = Watch::default();
    let (finished, signal) = std::sync::mpsc::channel::<()>();
    let (result, outcome) = std::thread::scope(|scope| {
        let watch = &watch;
        let worker = scope.spawn(move || {
            let result = pool.run(|| work(watch));
            // The receiver lives until the worker is joined; a failed send cannot happen.
            let _ = finished.send(());
            result
        });
        let mut outcome = Ok(());
        // Until the worker says it finished (or panicked, dropping its sender).
        while let Err(std::sync::mpsc::RecvTimeoutError::Timeout) = signal.recv_timeout(HEARTBEAT) {
            if outcome.is_ok() {
                let done = watch.done.load(std::sync::atomic::Ordering::Relaxed);
                if let Err(e) = monitor.progress(done.min(total), total) {
                    watch.stop.store(true, std::sync::atomic::Ordering::Relaxed);
                    outcome = Err(e);
                }
            }
        }
        let result = worker
            .join()
            .unwrap_or_else(|panic| std::panic::resume_unwind(panic));
        (result, outcome)
    });
    outcome?;
    monitor.progress(total, total)?;
    Ok(result)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A monitor that stops the work at its first heartbeat.
    struct StopAtOnce;

    impl Monitor for StopAtOnce {
        fn progress(&self, _done: usize, _total: usize) -> Result<()> {
            Err(Error::Interrupted)
        }
    }

    /// Records every report.
    #[derive(Default)]
    struct Record(std::sync::Mutex<Vec<(usize, usize)>>);

    impl Monitor for Record {
        fn progress(&self, done: usize, total: usize) -> Result<()> {
            self.0.lock().unwrap().push((done, total));
            Ok(())
        }
    }

    #[test]
    fn watched_work_stops_when_the_monitor_says_so() {
        let pool = Threads::Fixed(2).pool().unwrap();
        let outcome = watched(&pool, &StopAtOnce, 10, |watch| {
            // Would run for minutes; checks the flag between blocks of 1 ms.
            let mut blocks = 0;
            while !watch.stopped() && blocks < 600_000 {
                std::thread::sleep(std::time::Duration::from_millis(1));
                blocks += 1;
            }
            blocks
        });
        assert!(matches!(outcome, Err(Error::Interrupted)));
    }

    #[test]
    fn watched_reports_monotone_progress_ending_at_total() {
        let pool = Threads::Fixed(2).pool().unwrap();
        let record = Record::default();
        let value = watched(&pool, &record, 5, |watch| {
            for _ in 0..5 {
                std::thread::sleep(HEARTBEAT / 2);
                watch.advance(1);
            }
            42
        })
        .unwrap();
        assert_eq!(value, 42);
        let seen = record.0.into_inner().unwrap();
        assert_eq!(seen.last(), Some(&(5, 5)));
        assert!(seen.windows(2).all(|w| w[0].0 <= w[1].0 && w[1].1 == 5));
        assert!(seen.len() >= 2, "{seen:?}");
    }
}
