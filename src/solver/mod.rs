//! Solvers: linear epsilon-SVR by dual coordinate descent (`dcd`) or by primal Newton
//! passes for the squared loss (`newton`), the streaming driver of both (`blocks`, over
//! the shared pass of `stream`), and exact kernel epsilon-SVR by SMO (`smo`).

pub mod blocks;
pub mod dcd;
pub mod newton;
pub mod smo;
pub(crate) mod stream;
