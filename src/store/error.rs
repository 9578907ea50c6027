//! Why a results store could not do what was asked.

use thiserror::Error;

/// A store failure, rendered once at the command's edge.
#[derive(Debug, Error)]
pub enum StoreError {
    /// A URL that names no store taucal knows.
    #[error("store URL `{url}` {why}")]
    Url {
        /// As given.
        url: String,
        /// What is wrong with it.
        why: String,
    },
    /// The store could not be reached or opened (server down, wrong credentials, no such file).
    #[error("cannot open the store {url}: {message}")]
    Connect {
        /// The URL, password hidden.
        url: String,
        /// The driver's words.
        message: String,
    },
    /// The store was made by a newer taucal.
    #[error("the store {url} has schema version {found}; this taucal knows up to {known}")]
    NewerSchema {
        /// The URL, password hidden.
        url: String,
        /// Its version.
        found: i64,
        /// Ours.
        known: i64,
    },
    /// A query failed; the transaction was rolled back.
    #[error("store {url}: {message}")]
    Query {
        /// The URL, password hidden.
        url: String,
        /// The driver's words.
        message: String,
    },
    /// A directory that is not a run directory, or whose files cannot be read.
    #[error("{path}: {message}")]
    RunDir {
        /// The directory or file.
        path: String,
        /// What is wrong.
        message: String,
    },
}
