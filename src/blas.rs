//! The BLAS/LAPACK library (OpenBLAS, linked through ndarray-linalg and lapack-sys) runs
//! on the calling thread only.
//!
//! kernlake parallelises with its own pool (`--threads`), and its LAPACK calls are made
//! either from one driver thread between passes or from several pool threads at once
//! (tune's candidates). OpenBLAS's own worker threads busy-wait between calls, so beside a
//! busy pool they take processor time from it: measured on this project's 2-core machine,
//! `tune` on 4,784 CCPP rows with one thread spent 5.4 s of system time spinning and took
//! 10.2 s, against 5.7 s with OpenBLAS on one thread, and up to 20 times longer while other
//! programs shared the processors. Running OpenBLAS single-threaded is the common practice
//! when the caller parallelises, and it makes the results independent of OpenBLAS's own
//! thread count.

use std::os::raw::c_int;
use std::sync::Once;

extern "C" {
    /// OpenBLAS's setting of its worker thread count (every OpenBLAS build has it).
    fn openblas_set_num_threads(num_threads: c_int);
}

/// Makes OpenBLAS run on the calling thread only; called before the library's LAPACK
/// calls (cheap after the first time).
pub(crate) fn single_threaded() {
    static ONCE: Once = Once::new();
    ONCE.call_once(|| {
        // SAFETY: the function takes a plain integer and only stores the setting (it is
        // called once, before this process's first LAPACK call that follows it).
        unsafe { openblas_set_num_threads(1) }
    });
}
