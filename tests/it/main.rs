//! Integration tests: one binary (so the large dependencies link once), one module per
//! area of the job; every check names its outside source beside it.

mod accuracy;
mod audit;
mod band;
mod cli;
mod common;
mod data_sources;
mod dcd;
mod demo_data;
mod durability;
mod features;
mod foundation;
mod kernel;
mod layers;
mod metrics;
mod modelfile;
mod object_store;
mod score;
mod score_kill;
mod smo;
mod streaming;
mod survey;
mod tune;
