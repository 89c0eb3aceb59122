//! Solvers: linear epsilon-SVR by dual coordinate descent (`dcd`) or by primal Newton
//! passes for the squared loss (`newton`); the streaming trainer of both (`blocks`: the
//! epoch loop and one strategy per solver) over the shared pass (`source` of rows,
//! `stream` that reads and maps them, `cache` of what stays in memory); and exact kernel
//! epsilon-SVR by SMO (`smo`).

pub mod barrier;
pub mod blocks;
pub(crate) mod cache;
pub mod dcd;
pub mod newton;
pub(crate) mod rows;
pub mod smo;
pub mod source;
pub(crate) mod stream;
