//! A small team of threads for the very short parallel loops of an SMO iteration.
//!
//! One SMO kernel row on a shrunk active set is a few microseconds of work, and there
//! may be a hundred thousand of them in a fit. A general work-stealing pool hands such a
//! job to a thread that has gone to sleep between rows, and waking it costs about as much
//! as the row itself. Here the helpers stay awake for the length of the fit, each
//! watching one shared word, so a loop reaches them in the time a cache line takes to
//! move between cores (the persistent "team" of fork–join runtimes; Mellor-Crummey &
//! Scott, ACM TOCS 9, 1991, on spinning on a shared flag).
//!
//! A loop of `count` tasks is published as one 64-bit word (generation, next task,
//! task count). The caller and the helpers claim tasks from it by compare-and-swap, so
//! every task runs exactly once, on whichever thread claims it; the caller then waits
//! until every claimed task has finished. Results therefore do not depend on which
//! thread ran what, provided each task writes only its own output: that is what
//! [`Crew::chunks_mut`] guarantees by construction. A helper that has not started yet
//! simply claims nothing; the caller runs the loop alone.

use std::cell::Cell;
use std::marker::PhantomData;
use std::panic::{catch_unwind, resume_unwind, AssertUnwindSafe};
use std::sync::atomic::{AtomicBool, AtomicPtr, AtomicU64, Ordering::*};

/// Tasks of one published loop (they share 16 bits of the claim word).
const MAX_TASKS: usize = u16::MAX as usize;
/// Idle checks a helper makes with a pause instruction before it starts yielding its
/// core between checks (a few tens of microseconds).
const SPINS_BEFORE_YIELD: u32 = 1 << 14;

/// A task body, called with the task index.
type Task<'f> = &'f (dyn Fn(usize) + Sync);

/// The state the caller and the helpers share.
struct Shared {
    /// `generation << 32 | next << 16 | count`.
    claim: AtomicU64,
    /// Tasks of the current loop that have finished.
    done: AtomicU64,
    /// The current loop's body: a pointer to a [`Task`] on the caller's stack.
    job: AtomicPtr<()>,
    /// Set when a helper's task panicked.
    poisoned: AtomicBool,
    /// Set when the team disbands.
    stop: AtomicBool,
}

/// `(next, count)` of a claim word.
fn unpack(w: u64) -> (usize, usize) {
    (((w >> 16) & 0xffff) as usize, (w & 0xffff) as usize)
}

impl Shared {
    /// Claims the next task of the published loop, if one is left.
    fn claim(&self) -> Option<usize> {
        let mut w = self.claim.load(Acquire);
        loop {
            let (next, count) = unpack(w);
            if next >= count {
                return None;
            }
            match self
                .claim
                .compare_exchange_weak(w, w + (1 << 16), AcqRel, Acquire)
            {
                Ok(_) => return Some(next),
                Err(now) => w = now,
            }
        }
    }

    /// A helper's life: claim and run tasks until the team disbands.
    fn serve(&self) {
        let mut idle = 0u32;
        while !self.stop.load(Acquire) {
            match self.claim() {
                Some(k) => {
                    // SAFETY: the claim succeeded on the loop the pointer was published
                    // with (it is stored before the claim word and replaced only after
                    // every task of the loop, this one included, has finished), and the
                    // caller keeps the body alive until then.
                    let task = unsafe { *(self.job.load(Acquire) as *const Task) };
                    if catch_unwind(AssertUnwindSafe(|| task(k))).is_err() {
                        self.poisoned.store(true, Release);
                    }
                    self.done.fetch_add(1, Release);
                    idle = 0;
                }
                None if idle < SPINS_BEFORE_YIELD => {
                    idle += 1;
                    std::hint::spin_loop();
                }
                None => std::thread::yield_now(),
            }
        }
    }
}

/// The caller's handle on the team: runs loops on itself and the helpers. Not `Sync`:
/// only the thread that formed the team publishes loops.
pub(super) struct Crew<'t> {
    shared: &'t Shared,
    helpers: usize,
    generation: Cell<u64>,
    _single: PhantomData<*const ()>,
}

/// Runs `body` with a crew of `rayon::current_num_threads()` threads, at most one per
/// processor the system reports (a spinning helper without a core of its own only makes
/// the others wait): the calling thread and helpers started for the purpose, which stay
/// awake until `body` returns.
pub(super) fn with_crew<R>(body: impl FnOnce(&Crew) -> R) -> R {
    let cores = std::thread::available_parallelism().map_or(1, |c| c.get());
    let helpers = rayon::current_num_threads().min(cores).saturating_sub(1);
    let shared = Shared {
        claim: AtomicU64::new(0),
        done: AtomicU64::new(0),
        job: AtomicPtr::new(std::ptr::null_mut()),
        poisoned: AtomicBool::new(false),
        stop: AtomicBool::new(false),
    };
    /// Disbands the team however `body` ends, so that the scope can join the helpers.
    struct Disband<'a>(&'a Shared);
    impl Drop for Disband<'_> {
        fn drop(&mut self) {
            self.0.stop.store(true, Release);
        }
    }
    std::thread::scope(|s| {
        let disband = Disband(&shared);
        // A helper that cannot start is no loss: the caller runs every task itself.
        let helpers = (0..helpers)
            .filter(|_| {
                std::thread::Builder::new()
                    .spawn_scoped(s, || shared.serve())
                    .is_ok()
            })
            .count();
        let crew = Crew {
            shared: &shared,
            helpers,
            generation: Cell::new(0),
            _single: PhantomData,
        };
        let out = body(&crew);
        drop(disband);
        out
    })
}

impl Crew<'_> {
    /// Threads taking part in a loop (the caller included).
    pub fn threads(&self) -> usize {
        self.helpers + 1
    }

    /// Runs `task(k)` once for every `k < count`, spread over the crew; returns when all
    /// have finished. A panic in a task is raised again here once the others are done.
    pub fn for_each(&self, count: usize, task: &(dyn Fn(usize) + Sync)) {
        if self.helpers == 0 || count <= 1 {
            (0..count).for_each(task);
            return;
        }
        for start in (0..count).step_by(MAX_TASKS) {
            let len = (count - start).min(MAX_TASKS);
            let shifted = |k: usize| task(start + k);
            self.publish(len, &shifted);
        }
    }

    /// One loop of at most [`MAX_TASKS`] tasks.
    fn publish(&self, count: usize, task: Task) {
        let sh = self.shared;
        let generation = self.generation.get() + 1;
        self.generation.set(generation);
        // Every task of the previous loop has finished, so no helper touches `done` or
        // the body until the new claim word appears.
        sh.done.store(0, Relaxed);
        sh.job.store(&task as *const Task as *mut (), Release);
        sh.claim
            .store(((generation & 0xffff_ffff) << 32) | count as u64, Release);
        let mut failure = None;
        while let Some(k) = sh.claim() {
            if failure.is_none() {
                failure = catch_unwind(AssertUnwindSafe(|| task(k))).err();
            }
            sh.done.fetch_add(1, Release);
        }
        // The body and whatever it borrows must outlive the helpers' tasks. A helper
        // that was descheduled mid-task gets the core back by the yields.
        let mut waits = 0u32;
        while sh.done.load(Acquire) < count as u64 {
            if waits < SPINS_BEFORE_YIELD {
                waits += 1;
                std::hint::spin_loop();
            } else {
                std::thread::yield_now();
            }
        }
        if let Some(payload) = failure {
            resume_unwind(payload);
        }
        if sh.poisoned.load(Acquire) {
            panic!("a task of the SMO crew panicked on a helper thread");
        }
    }

    /// Splits `data` into consecutive chunks of `span` items (the last may be shorter),
    /// runs `task(index, chunk)` on each, spread over the crew, and returns the results
    /// in chunk order.
    pub fn chunks_mut<T: Send, R: Send>(
        &self,
        data: &mut [T],
        span: usize,
        task: impl Fn(usize, &mut [T]) -> R + Sync,
    ) -> Vec<R> {
        assert!(span > 0, "crew: chunk span must be positive");
        let len = data.len();
        let count = len.div_ceil(span);
        let mut results: Vec<Option<R>> = (0..count).map(|_| None).collect();
        let (base, slots) = (Base(data.as_mut_ptr()), Base(results.as_mut_ptr()));
        let (base, slots) = (&base, &slots);
        self.for_each(count, &|k| {
            let start = k * span;
            let end = (start + span).min(len);
            // SAFETY: `for_each` runs each index exactly once, so the chunks and result
            // slots handed out are disjoint parts of `data` and `results`, which are
            // borrowed mutably for the whole loop.
            let (chunk, slot) = unsafe {
                (
                    std::slice::from_raw_parts_mut(base.0.add(start), end - start),
                    &mut *slots.0.add(k),
                )
            };
            *slot = Some(task(k, chunk));
        });
        results
            .into_iter()
            .map(|r| r.expect("every task ran"))
            .collect()
    }

    /// `task(k)` for every `k < count`, spread over the crew, in order.
    pub fn map<R: Send>(&self, count: usize, task: impl Fn(usize) -> R + Sync) -> Vec<R> {
        let mut slots: Vec<()> = vec![(); count];
        self.chunks_mut(&mut slots, 1, |k, _| task(k))
    }
}

/// The start of a slice whose disjoint chunks go to different threads.
struct Base<T>(*mut T);
// SAFETY: only used by `Crew::chunks_mut`, which hands each chunk (and result slot) to
// one task.
unsafe impl<T: Send> Sync for Base<T> {}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::atomic::AtomicUsize;

    fn in_pool<R: Send>(threads: usize, f: impl FnOnce() -> R + Send) -> R {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(f)
    }

    /// Every task runs exactly once, loop after loop, whatever the crew size (the
    /// contract of a parallel loop; common practice).
    #[test]
    fn every_task_runs_once_in_every_loop() {
        for threads in [1, 2, 4] {
            in_pool(threads, || {
                with_crew(|crew| {
                    assert!(crew.threads() <= threads);
                    for count in [0, 1, 2, 3, 17, 64, 1000] {
                        let hits: Vec<AtomicUsize> =
                            (0..count).map(|_| AtomicUsize::new(0)).collect();
                        crew.for_each(count, &|k| {
                            hits[k].fetch_add(1, Relaxed);
                        });
                        assert!(hits.iter().all(|h| h.load(Relaxed) == 1), "{count}");
                    }
                })
            });
        }
    }

    /// Chunks cover the slice exactly once, in place, with the last one shorter.
    #[test]
    fn chunks_cover_the_slice() {
        in_pool(2, || {
            with_crew(|crew| {
                let mut v = vec![0usize; 1001];
                crew.chunks_mut(&mut v, 64, |k, c| {
                    for (i, e) in c.iter_mut().enumerate() {
                        *e += k * 64 + i + 1;
                    }
                });
                assert!(v.iter().enumerate().all(|(i, &e)| e == i + 1));
            })
        });
    }

    /// A panicking task is reported to the caller after the loop has drained, and the
    /// team still disbands (the test would hang otherwise).
    #[test]
    #[should_panic]
    fn a_panicking_task_reaches_the_caller() {
        in_pool(2, || {
            with_crew(|crew| {
                crew.for_each(100, &|k| {
                    if k == 57 {
                        panic!("task 57");
                    }
                })
            })
        });
    }
}
