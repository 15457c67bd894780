//! Progress reporting and cancellation for long computations.
//!
//! Every long engine call takes a [`Control`]. Workers (GUI threads, a sweep, the CLI's progress
//! bar) create one, hand a clone to the engine, and watch or cancel it from elsewhere.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};

/// Shared progress and cancel state. Cheap to clone; all clones see the same state.
#[derive(Clone, Default)]
pub struct Control {
    inner: Arc<Inner>,
    /// Shared with every control made by [`Control::linked`].
    cancel: Arc<AtomicBool>,
}

#[derive(Default)]
struct Inner {
    done: AtomicU64,
    total: AtomicU64,
    on_progress: std::sync::Mutex<Option<Box<dyn Fn(u64, u64) + Send + Sync>>>,
}

/// Returned by engine calls that were cancelled through their [`Control`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Cancelled;

impl std::fmt::Display for Cancelled {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("cancelled")
    }
}
impl std::error::Error for Cancelled {}

impl Control {
    pub fn new() -> Self {
        Self::default()
    }

    /// Calls `f(done, total)` whenever progress moves (from whichever thread does the work).
    pub fn with_callback(f: impl Fn(u64, u64) + Send + Sync + 'static) -> Self {
        let c = Self::default();
        *c.inner.on_progress.lock().unwrap() = Some(Box::new(f));
        c
    }

    /// A control with its own progress that is cancelled whenever this one is (and cancels
    /// this one when cancelled): one per reading of a sweep, say, under the sweep's own.
    pub fn linked(&self) -> Control {
        Control { inner: Arc::default(), cancel: self.cancel.clone() }
    }

    pub fn cancel(&self) {
        self.cancel.store(true, Ordering::Relaxed);
    }

    pub fn is_cancelled(&self) -> bool {
        self.cancel.load(Ordering::Relaxed)
    }

    /// `Err(Cancelled)` once cancel was asked for; call between units of work.
    pub fn check(&self) -> Result<(), Cancelled> {
        if self.is_cancelled() { Err(Cancelled) } else { Ok(()) }
    }

    /// Starts a new phase of `total` units.
    pub fn begin(&self, total: u64) {
        self.inner.total.store(total, Ordering::Relaxed);
        self.inner.done.store(0, Ordering::Relaxed);
        self.notify();
    }

    /// Adds `units` to a total begun with [`Control::begin`] (adaptive methods grow their work).
    pub fn grow(&self, units: u64) {
        self.inner.total.fetch_add(units, Ordering::Relaxed);
        self.notify();
    }

    /// Marks `units` more as done.
    pub fn advance(&self, units: u64) {
        self.inner.done.fetch_add(units, Ordering::Relaxed);
        self.notify();
    }

    /// (done, total) as last reported.
    pub fn progress(&self) -> (u64, u64) {
        (self.inner.done.load(Ordering::Relaxed), self.inner.total.load(Ordering::Relaxed))
    }

    /// Share done in 0..=1 (0 before any total is known).
    pub fn fraction(&self) -> f32 {
        let (d, t) = self.progress();
        if t == 0 { 0.0 } else { (d as f32 / t as f32).min(1.0) }
    }

    fn notify(&self) {
        if let Some(f) = self.inner.on_progress.lock().unwrap().as_ref() {
            let (d, t) = self.progress();
            f(d, t);
        }
    }
}
