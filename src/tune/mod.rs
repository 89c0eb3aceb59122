//! Default hyper-parameters from the data (and, later, validation search).

mod defaults;

pub use defaults::{cherkassky_ma, knn_noise_sd, median_gamma, Defaults};
