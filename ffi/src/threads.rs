//! The library's worker threads: one pool per process, re-created after a `fork`, its size
//! settable with `ringmain_set_threads`.
//!
//! Worker threads do not survive `fork`: the child has only the thread that called `fork`. A pool
//! made before the fork would be waited on for ever by the child's first parallel call. The pool
//! is therefore tagged with the id of the process that made it, and a call from another process
//! (a forked child) makes a new pool; the parent's pool is kept aside in the child, never dropped
//! (its threads do not exist there, so there is nothing to join).
//!
//! Which calls use the pool: `ringmain_model_solve` (the first solve of a network analyses it on
//! two threads; a network of more than a few thousand links evaluates its links' laws on all
//! threads) and `ringmain_model_simulate` (its solves). Everything else runs on the calling thread.
//!
//! The pool is built on rayon (already the core's parallel engine: its scoped `install` makes the
//! core's parallel loops run on this pool instead of rayon's global one, which is made once per
//! process and never re-created).

use crate::boundary::{out, Failure};
use crate::codes::ringmain_status;
use rayon::{ThreadPool, ThreadPoolBuilder};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex, PoisonError};

/// The threads asked for with `ringmain_set_threads`; 0: one per core.
static THREADS: AtomicUsize = AtomicUsize::new(0);

/// The pool and the id of the process that made it.
static POOL: Mutex<Option<(u32, Arc<ThreadPool>)>> = Mutex::new(None);

/// Pools made by the parent of a forked child, kept (not dropped: their threads do not exist in
/// the child, so there is nothing to join) where leak checkers still see them.
static ABANDONED: Mutex<Vec<Arc<ThreadPool>>> = Mutex::new(Vec::new());

fn abandon(pool: Arc<ThreadPool>) {
    ABANDONED.lock().unwrap_or_else(PoisonError::into_inner).push(pool);
}

/// Most threads a pool may have (far beyond any machine's cores; a bound on typing mistakes).
pub const MAX_THREADS: usize = 4096;

/// The number of threads a new pool gets.
fn wanted() -> usize {
    match THREADS.load(Ordering::SeqCst) {
        0 => std::thread::available_parallelism().map_or(1, |n| n.get()),
        n => n,
    }
}

/// This process's pool, made on first use (and again in a forked child).
fn pool() -> Result<Arc<ThreadPool>, Failure> {
    let pid = std::process::id();
    let mut slot = POOL.lock().unwrap_or_else(PoisonError::into_inner);
    if let Some((owner, pool)) = slot.as_ref() {
        if *owner == pid {
            return Ok(pool.clone());
        }
    }
    if let Some((owner, old)) = slot.take() {
        if owner != pid {
            // Made by the parent before a fork: its threads do not exist here.
            abandon(old);
        }
    }
    let pool =
        ThreadPoolBuilder::new().num_threads(wanted()).thread_name(|i| format!("ringmain-{i}")).build().map_err(
            |e| Failure::new(ringmain_status::RINGMAIN_SOLVE_FAILED, format!("cannot start worker threads: {e}")),
        )?;
    let pool = Arc::new(pool);
    *slot = Some((pid, pool.clone()));
    Ok(pool)
}

/// Runs `work` on this process's pool (the core's parallel loops inside it use the pool).
pub fn install<R: Send>(work: impl FnOnce() -> R + Send) -> Result<R, Failure> {
    Ok(pool()?.install(work))
}

/// The number of threads the pool has or will have.
pub fn current() -> usize {
    let pid = std::process::id();
    let slot = POOL.lock().unwrap_or_else(PoisonError::into_inner);
    match slot.as_ref() {
        Some((owner, pool)) if *owner == pid => pool.current_num_threads(),
        _ => wanted(),
    }
}

/// Sets the number of worker threads of the library in this process: `threads` = 0 for one per
/// core (the default), else 1 to 4096. Takes effect at the next call that uses threads; calls
/// running on other threads finish on the old pool. A process made by `fork` starts a new pool of
/// this size at its first such call.
///
/// Calls that use the worker threads: `ringmain_model_solve` and `ringmain_model_simulate`; all
/// other functions run on the calling thread.
///
/// Errors: `RINGMAIN_INVALID_ARGUMENT` above 4096.
#[no_mangle]
#[must_use]
pub extern "C" fn ringmain_set_threads(threads: usize) -> ringmain_status {
    ffi_boundary! {
        if threads > MAX_THREADS {
            return Err(Failure::invalid(format!(
                "argument 'threads': {threads} is more than {MAX_THREADS}; give 0 for one thread per core"
            )));
        }
        THREADS.store(threads, Ordering::SeqCst);
        let mut slot = POOL.lock().unwrap_or_else(PoisonError::into_inner);
        if let Some((owner, old)) = slot.take() {
            if owner != std::process::id() {
                abandon(old);
            }
            // Otherwise dropped: its threads end once the calls running on it return.
        }
        Ok(())
    }
}

/// Writes the number of worker threads the library uses in this process to `*out` (the size set
/// by `ringmain_set_threads`, or the number of cores).
///
/// # Safety
/// `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_get_threads(out: *mut usize) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let out = unsafe { self::out(out, "out") }?;
        out.write(current());
        Ok(())
    }
}
