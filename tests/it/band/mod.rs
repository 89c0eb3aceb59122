//! Expected-value bands (split conformal prediction, Lei et al. JASA 2018) and the
//! deviation report: coverage on open datasets, local weighting on a heteroscedastic
//! function, the binomial tail against an independent computation, determinism and the
//! error sentences.

mod binomial;
mod coverage;
mod demo;
mod identity;
mod local;
