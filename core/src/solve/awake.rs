//! A second worker kept awake while a large network is solved.
//!
//! A large network's solve shares its work between two threads several times per iteration:
//! the links' pass in two halves (`assemble`), the factorization's two sets of subtrees, the
//! rows of its dense top block and their Schur complement (`factor`). Each share lasts a
//! fraction of a millisecond to a few milliseconds, and between them the second thread has
//! nothing to do, so rayon's worker goes to sleep. On the virtual machines this program is
//! measured on, waking it again took as long as the share itself: traced at 1e5 junctions, the
//! second half of the factorization often started only when the first had ended (1.4 ms
//! later), and two threads factored in 3.3–6.5 ms what one thread factors in 3.9 ms.
//!
//! [`with_second_worker_awake`] runs a solve on a worker of rayon's pool while a job on another
//! worker waits for work by polling rather than sleeping: it runs every job it can take
//! ([`rayon::yield_now`], which is how it takes the solve's shares), and gives its core to any
//! other thread that wants it (`sched_yield`) when there is none. This is the active wait that
//! parallel runtimes commonly use for short parallel regions (the OpenMP standard's
//! `OMP_WAIT_POLICY=active`, for instance). Measured at 1e5 junctions (`--timings`, alternately,
//! 5 December 2026): assembly 14–17 → 11 ms, factorization 34–43 → 26 ms (nine iterations),
//! the whole `solve` 0.23–0.24 → 0.20–0.22 s, for some 20–40 ms more processor time. At 1e6
//! junctions, whose shares last tens of milliseconds, it changes nothing measurable.
//!
//! It applies only where the work is shared at all (a large network, see the callers), when
//! the pool has two threads or more, and when the caller is not already one of the pool's
//! workers (a fire-flow or sweep analysis solves many networks at once, one per worker: every
//! core is busy already). A caller outside the pool waits for a worker to take the solve, as
//! its shares already waited for workers to take them before. The answer is the same to the
//! last bit either way: which thread does a share changes nothing in it
//! (`the_links_pass_on_two_threads_is_the_one_thread_pass` compares a large network's solve
//! through here with one on the calling thread, the links' pass on one thread;
//! `two_threads_factor_as_one_does` the factorization's). Measured on the same binary, the 1e5
//! and 1e6 results are byte-identical with and without it.

use super::structure::Structure;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

/// How long the poller waits without finding work before it ends. A solve's stretches on one
/// thread between its shares last a few milliseconds at most at 1e5 junctions (the triangular
/// solves, the status logic). The limit also ends what could otherwise never end: two callers
/// outside the pool solving at once, each worker inside one solve, each polling for the
/// other's end under the other's solve (work stealing can nest a poller above another solve's
/// frame); with the limit both pollers end when neither finds work, and both solves go on.
const IDLE_LIMIT: Duration = Duration::from_millis(20);

/// Whether a solve of `structure` shares work between two threads anywhere: the links' pass
/// (`assemble::PARALLEL_LINKS` core links) or the factorization (a factor of
/// `factor::SPLIT_MIN_ENTRIES` entries).
pub(super) fn shares_work(structure: &Structure) -> bool {
    !super::assemble::one_thread_pass()
        && (structure.core.len() >= super::assemble::PARALLEL_LINKS
            || structure.factor_nnz() >= super::factor::SPLIT_MIN_ENTRIES)
}

/// Runs `f`, on a worker of rayon's pool with another worker polling for its shares of the work
/// when `large` and the pool can (see the [module docs](self)); else simply on this thread.
pub(crate) fn with_second_worker_awake<R: Send>(large: bool, f: impl FnOnce() -> R + Send) -> R {
    if !large || rayon::current_num_threads() < 2 || rayon::current_thread_index().is_some() {
        return f();
    }
    let done = AtomicBool::new(false);
    rayon::scope(|scope| {
        // `f`'s worker: the poller never runs there (if that worker takes the polling job
        // itself, while it waits for a share another worker took, it returns at once, or it
        // would poll above `f`'s own frame until `f` ended: never).
        let owner = rayon::current_thread_index();
        let done = &done;
        scope.spawn(move |_| {
            if rayon::current_thread_index() == owner {
                return;
            }
            let mut last_work = Instant::now();
            while !done.load(Ordering::Acquire) {
                if matches!(rayon::yield_now(), Some(rayon::Yield::Executed)) {
                    last_work = Instant::now();
                } else if last_work.elapsed() > IDLE_LIMIT {
                    return;
                } else {
                    std::thread::yield_now();
                }
            }
        });
        // Set however `f` ends (a panic too), or the scope would wait for the poller forever.
        struct Done<'a>(&'a AtomicBool);
        impl Drop for Done<'_> {
            fn drop(&mut self) {
                self.0.store(true, Ordering::Release);
            }
        }
        let _done = Done(done);
        f()
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_work_is_done_and_a_panic_ends_the_poller() {
        // A fork-join inside, as the solver's shares are.
        let sum = with_second_worker_awake(true, || {
            let (a, b) = rayon::join(|| (0..1000u64).sum::<u64>(), || (1000..2000u64).sum::<u64>());
            a + b
        });
        assert_eq!(sum, (0..2000u64).sum::<u64>());
        // Inside the pool: nothing is spawned, and it still answers.
        let inner = rayon::scope(|_| with_second_worker_awake(true, || 7));
        assert_eq!(inner, 7);
        // A panic in `f` reaches the caller, and the poller stops (no hang).
        let caught = std::panic::catch_unwind(|| with_second_worker_awake(true, || panic!("a solve that panics")));
        assert!(caught.is_err());
        assert_eq!(with_second_worker_awake(false, || 3), 3);
    }

    /// Callers outside the pool solving at once, each with shares of work (nested joins), all
    /// finish with their own answers. (The nesting that `IDLE_LIMIT` guards against did not
    /// occur with the limit taken away, in eight runs of this test with four and with eight
    /// callers: 10,600 calls; the limit stays, as the nesting is possible.)
    #[test]
    fn callers_at_once_all_finish() {
        fn shares(depth: u32, from: u64) -> u64 {
            if depth == 0 {
                return (from..from + 2000).map(|x| x % 7).sum();
            }
            let (a, b) = rayon::join(|| shares(depth - 1, from), || shares(depth - 1, from + 1));
            a + b
        }
        let expected: Vec<u64> = (0..4).map(|c| shares(6, c)).collect();
        std::thread::scope(|scope| {
            let callers: Vec<_> = (0..4u64)
                .map(|c| {
                    scope.spawn(move || {
                        (0..50).map(|_| with_second_worker_awake(true, || shares(6, c))).collect::<Vec<u64>>()
                    })
                })
                .collect();
            for (c, caller) in callers.into_iter().enumerate() {
                let got = caller.join().expect("a caller panicked");
                assert!(got.iter().all(|&g| g == expected[c]), "caller {c}");
            }
        });
    }
}
