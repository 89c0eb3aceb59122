//! Solvers: linear epsilon-SVR by dual coordinate descent (`dcd`), its streaming
//! block-minimization driver (`blocks`), and exact kernel epsilon-SVR by SMO (`smo`).

pub mod blocks;
pub mod dcd;
pub mod smo;
