//! A bound on CPU- and memory-heavy work across requests: scoring, building cost maps, bundles
//! and overlays, and decoding frames each take a permit. Without it, a handful of parallel
//! requests from one viewer token could each hold hundreds of megabytes and every core at once.
//!
//! Requests beyond the permits wait, but only so many: past the queue they are answered 503
//! `busy` with `Retry-After: 1`, so a burst is shed quickly instead of piling up memory and
//! latency for everyone (light routes such as `/healthz` never wait here).

use super::error::ServiceError;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicU64, AtomicUsize, Ordering};
use tokio::sync::{OwnedSemaphorePermit, Semaphore};

/// The permits and the count of requests waiting for one.
pub struct Heavy {
    permits: Arc<Semaphore>,
    waiting: AtomicUsize,
    queue: usize,
    total: usize,
}

impl Heavy {
    /// `permits` at once (at least 1), at most `queue` more waiting.
    pub fn new(permits: usize, queue: usize) -> Self {
        Self {
            permits: Arc::new(Semaphore::new(permits.max(1))),
            waiting: AtomicUsize::new(0),
            queue,
            total: permits.max(1),
        }
    }

    /// A permit now, or after waiting in the queue; `busy` (503) when the queue is full.
    pub async fn acquire(&self) -> Result<OwnedSemaphorePermit, ServiceError> {
        if let Ok(p) = self.permits.clone().try_acquire_owned() {
            return Ok(p);
        }
        if self.waiting.fetch_add(1, Ordering::SeqCst) >= self.queue {
            self.waiting.fetch_sub(1, Ordering::SeqCst);
            return Err(ServiceError::Busy);
        }
        // Decremented however the wait ends, also when the client hangs up meanwhile and the
        // handler future is dropped.
        struct Waiting<'a>(&'a AtomicUsize);
        impl Drop for Waiting<'_> {
            fn drop(&mut self) {
                self.0.fetch_sub(1, Ordering::SeqCst);
            }
        }
        let _w = Waiting(&self.waiting);
        self.permits
            .clone()
            .acquire_owned()
            .await
            .map_err(|e| ServiceError::Internal(format!("heavy permits closed: {e}")))
    }
}

impl Heavy {
    /// (running, waiting) now.
    pub fn in_use(&self) -> (usize, usize) {
        let free = self.permits.available_permits();
        (
            self.total.saturating_sub(free),
            self.waiting.load(Ordering::SeqCst),
        )
    }
}

impl Default for Heavy {
    fn default() -> Self {
        let cores = crate::config::cores();
        Self::new(cores, 4 * cores)
    }
}

/// The scheduling priority ("nice" value) heavy work runs at: below the async workers and the
/// database's threads (nice 0), so that on a machine whose cores the heavy work fills,
/// `/healthz`, sign-ins and document reads still get the CPU when they need it.
pub const HEAVY_NICE: i32 = 10;

/// Lowers the calling thread's priority to [`HEAVY_NICE`] (Linux; elsewhere nothing). A thread
/// cannot raise its priority again without privileges, so this is for threads that do heavy
/// work: rayon's pool (set at its start) and the blocking threads of [`spawn`].
pub fn lower_this_thread() {
    lower_this_thread_to(HEAVY_NICE);
}

/// Lowers the calling thread's priority to the nice value `nice` (Linux; elsewhere nothing);
/// a thread already at or below it is left as it is.
pub fn lower_this_thread_to(nice: i32) {
    #[cfg(target_os = "linux")]
    // SAFETY: plain system calls on the calling thread, with no pointers; a failure (not
    // permitted, say) leaves the priority as it was, which is harmless.
    unsafe {
        let tid = libc::syscall(libc::SYS_gettid) as libc::id_t;
        if libc::getpriority(libc::PRIO_PROCESS, tid) < nice {
            libc::setpriority(libc::PRIO_PROCESS, tid, nice);
        }
    }
    #[cfg(not(target_os = "linux"))]
    let _ = nice;
}

/// Runs heavy CPU work on tokio's blocking threads, at [`HEAVY_NICE`].
pub fn spawn<F, R>(f: F) -> tokio::task::JoinHandle<R>
where
    F: FnOnce() -> R + Send + 'static,
    R: Send + 'static,
{
    tokio::task::spawn_blocking(move || {
        lower_this_thread();
        f()
    })
}

/// Heavy computations that stopped early because their client hung up, since the process
/// started (`goalsmith_heavy_stopped_total` in `/metrics`).
static STOPPED_EARLY: AtomicU64 = AtomicU64::new(0);

/// How many heavy computations stopped early because their client hung up.
pub fn stopped_early() -> u64 {
    STOPPED_EARLY.load(Ordering::Relaxed)
}

/// Set when the handler future that holds it is dropped: a client that hung up drops the
/// future, and the blocking work it started checks [`Cancel::flag`] to stop early.
pub struct Cancel(Stop);

impl Cancel {
    /// A guard with a fresh flag.
    pub fn new() -> Self {
        Self(Stop::never())
    }

    /// The flag to move into the blocking work.
    pub fn flag(&self) -> Stop {
        self.0.clone()
    }
}

impl Default for Cancel {
    fn default() -> Self {
        Self::new()
    }
}

impl Drop for Cancel {
    fn drop(&mut self) {
        self.0.0.set.store(true, Ordering::Relaxed);
    }
}

/// The blocking side of a [`Cancel`]: whether the work should stop.
#[derive(Clone)]
pub struct Stop(Arc<StopInner>);

struct StopInner {
    set: AtomicBool,
    noticed: AtomicBool,
}

impl Stop {
    /// A flag nothing sets, for work run outside a request.
    pub fn never() -> Self {
        Self(Arc::new(StopInner {
            set: AtomicBool::new(false),
            noticed: AtomicBool::new(false),
        }))
    }

    /// Whether the client hung up. The first time the work sees it, the stop is counted in
    /// [`stopped_early`] (once per computation, however often it asks).
    pub fn is_set(&self) -> bool {
        if !self.0.set.load(Ordering::Relaxed) {
            return false;
        }
        if !self.0.noticed.swap(true, Ordering::Relaxed) {
            STOPPED_EARLY.fetch_add(1, Ordering::Relaxed);
        }
        true
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[tokio::test]
    async fn a_full_queue_is_busy_and_a_freed_permit_is_reused() {
        let h = Arc::new(Heavy::new(1, 1));
        let first = h.acquire().await.expect("a free permit");
        // One may wait …
        let h2 = h.clone();
        let waiter = tokio::spawn(async move { h2.acquire().await.map(drop) });
        while h.waiting.load(Ordering::SeqCst) == 0 {
            tokio::task::yield_now().await;
        }
        // … the next is refused.
        assert!(matches!(h.acquire().await, Err(ServiceError::Busy)));
        drop(first);
        waiter
            .await
            .expect("join")
            .expect("the waiter gets the permit");
        assert_eq!(h.waiting.load(Ordering::SeqCst), 0);
        assert!(h.acquire().await.is_ok());
    }

    /// The calling thread's nice value (Linux).
    #[cfg(target_os = "linux")]
    fn nice_now() -> i32 {
        // SAFETY: system calls on the calling thread, with no pointers.
        unsafe { libc::getpriority(libc::PRIO_PROCESS, libc::syscall(libc::SYS_gettid) as _) }
    }

    #[cfg(target_os = "linux")]
    #[tokio::test]
    async fn heavy_work_runs_below_the_async_workers() {
        let worker = nice_now();
        let heavy = spawn(nice_now).await.expect("join");
        assert!(heavy >= HEAVY_NICE, "heavy work at nice {heavy}");
        // The caller's own thread is left as it was.
        assert_eq!(nice_now(), worker);
        // A thread already lower than that is not raised.
        let lowest = std::thread::spawn(|| {
            lower_this_thread_to(19);
            lower_this_thread();
            nice_now()
        })
        .join()
        .expect("join");
        assert_eq!(lowest, 19);
    }

    #[test]
    fn cancel_sets_its_flag_when_dropped() {
        let c = Cancel::new();
        let f = c.flag();
        assert!(!f.is_set());
        let before = stopped_early();
        drop(c);
        assert!(f.is_set());
        assert!(f.is_set(), "it stays set");
        // Counted once, however often the work asks (other tests may count their own meanwhile).
        assert!(stopped_early() > before);
    }
}
