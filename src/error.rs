//! The library's one error type and its `Result` alias.
//!
//! Every message is one sentence a person can act on, naming the file, row or column
//! when the failure comes from data. Misuse by a calling program (for example arrays
//! whose shapes disagree) panics at the caller's line instead; see each function's
//! `# Panics` section.

use std::path::PathBuf;

/// Crate-wide result alias.
pub type Result<T, E = Error> = std::result::Result<T, E>;

/// Everything that can go wrong in kernlake because of data, files or parameters.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum Error {
    /// A parameter is outside its valid range (C ≤ 0, epsilon < 0, D = 0, …).
    #[error("invalid value for {name}: {reason}")]
    InvalidParameter {
        /// The parameter's name as the user knows it.
        name: &'static str,
        /// Why the value was refused.
        reason: String,
    },

    /// No usable rows were left to fit on.
    #[error("no usable rows to fit on: {0}")]
    NoRows(String),

    /// A non-finite value (NaN or ±inf) reached an in-memory routine.
    #[error("non-finite value in row {row}, column {column} of the input array")]
    NonFinite {
        /// Zero-based row in the array.
        row: usize,
        /// Zero-based column in the array.
        column: usize,
    },

    /// A numerical routine failed because of the data (for example a landmark kernel
    /// matrix with no usable eigenvalue, or an eigensolver that did not converge).
    #[error("numerical failure: {0}")]
    Numerical(String),

    /// An operating-system error while reading or writing a file.
    #[error("{}: {source}", path.display())]
    Io {
        /// The file or folder concerned.
        path: PathBuf,
        /// The underlying error.
        source: std::io::Error,
    },

    /// An output file or folder could not be written; the message names the user's
    /// path (never a temporary name) and the real problem, the cause is kept.
    #[error("{}: {message} ({source})", path.display())]
    Output {
        /// The output file or folder as the user named it.
        path: PathBuf,
        /// What is wrong, as a clause.
        message: String,
        /// The underlying error.
        source: std::io::Error,
    },

    /// A data file could not be used (corrupt, unreadable, wrong layout).
    #[error("{}: {message}", path.display())]
    File {
        /// The file concerned.
        path: PathBuf,
        /// What is wrong with it.
        message: String,
    },

    /// A column of a data file could not be used (missing, not numeric, schemas disagree).
    #[error("{}, column '{column}': {message}", path.display())]
    Column {
        /// The file concerned.
        path: PathBuf,
        /// The column's name.
        column: String,
        /// What is wrong with it.
        message: String,
    },

    /// One value in a data file could not be used (missing under the `fail` policy).
    #[error("{}, row {row}, column '{column}': {message}", path.display())]
    Cell {
        /// The file concerned.
        path: PathBuf,
        /// One-based row number within that file.
        row: u64,
        /// The column's name.
        column: String,
        /// What is wrong with the value.
        message: String,
    },

    /// A model file could not be loaded or saved.
    #[error("model file {}: {message}", path.display())]
    ModelFile {
        /// The model file.
        path: PathBuf,
        /// What is wrong with it.
        message: String,
    },

    /// The input does not satisfy the model's input contract.
    #[error("{0}")]
    Contract(String),

    // --- solver (dcd): in-memory linear epsilon-SVR ---
    /// A non-finite target value (NaN or ±inf) reached an in-memory routine.
    #[error("non-finite target value in row {row} of the input array")]
    NonFiniteTarget {
        /// Zero-based row in the array.
        row: usize,
    },

    /// No target column was chosen for a fit.
    #[error("no target column was given: name the column to predict")]
    NoTarget,

    /// A column's values overflow double precision (its sum of squares is infinite), so
    /// standardizing it would silently erase it.
    #[error("column '{column}': its values overflow double precision (their squares reach infinity); rescale the column, for example to other units")]
    Overflow {
        /// The column's name.
        column: String,
    },

    /// A report or record could not be encoded (JSON).
    #[error("could not encode {what}: {source}")]
    Encode {
        /// What was being encoded.
        what: &'static str,
        /// The encoder's error.
        source: serde_json::Error,
    },

    /// The worker threads could not start.
    #[error("could not start {threads} worker thread(s): {source}")]
    Threads {
        /// Threads asked for.
        threads: usize,
        /// The thread pool's error.
        source: rayon::ThreadPoolBuildError,
    },

    /// The person asked to stop (for example Ctrl-C); nothing was written.
    #[error("the run was interrupted; nothing was written")]
    Interrupted,

    /// A request to an object store failed for good (missing bucket or object, access
    /// denied, refused credentials, or a transient failure that outlasted the retries).
    #[error("{url}: {message}")]
    Store {
        /// The object or prefix as the user named it (never credentials).
        url: String,
        /// The reason, as a clause.
        message: String,
        /// The store client's error.
        source: Box<dyn std::error::Error + Send + Sync>,
    },

    // --- score: batch scoring ---
    /// Scoring of a file stopped part-way because another file failed (its temporary
    /// output was removed; the other file's error is the one reported).
    #[error("scoring stopped because another file failed")]
    ScoreStopped,
    // --- tune: validation search ---
    /// Every candidate of a validation search failed (diverged or gave a non-finite
    /// error); the message names the best attempt.
    #[error("tuning failed: {0}")]
    TuneFailed(String),
}

impl Error {
    /// Shorthand for [`Error::InvalidParameter`].
    pub fn invalid(name: &'static str, reason: impl Into<String>) -> Self {
        Error::InvalidParameter {
            name,
            reason: reason.into(),
        }
    }

    /// Shorthand for [`Error::Io`].
    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io {
            path: path.into(),
            source,
        }
    }
}
