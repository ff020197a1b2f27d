//! Errors of the storage layer.

use thiserror::Error;

/// Why a storage call failed.
#[derive(Debug, Error)]
pub enum StoreError {
    /// The database could not be reached or a query failed.
    #[error("database error: {0}")]
    Database(#[from] sqlx::Error),
    /// A migration could not be applied.
    #[error("migration failed: {0}")]
    Migrate(#[from] sqlx::migrate::MigrateError),
    /// The write contradicts what is stored (e.g. a key that is taken); the message
    /// says what, for the client.
    #[error("{0}")]
    Conflict(String),
    /// The data does not fit what it is written into (a caller's bug: the API validates
    /// first); the message says what.
    #[error("{0}")]
    Invalid(String),
    /// The resource a write refers to does not exist; the message says which.
    #[error("{0}")]
    NotFound(String),
    /// Stored data could not be read back (a bug or a hand-edited database).
    #[error("stored data is not readable: {0}")]
    Corrupt(String),
    /// The database URL is not usable.
    #[error("database URL: {0}")]
    Url(String),
}

impl StoreError {
    /// A [`StoreError::Corrupt`] from any displayable cause.
    pub fn corrupt(what: impl std::fmt::Display) -> Self {
        Self::Corrupt(what.to_string())
    }

    /// True for a unique-constraint violation reported by either database.
    pub fn is_unique_violation(&self) -> bool {
        matches!(self, Self::Database(sqlx::Error::Database(e)) if e.is_unique_violation())
    }

    /// `e` as a [`StoreError::Conflict`] saying `what` when it is a unique-constraint
    /// violation, else as it is.
    pub fn unique_as_conflict(e: sqlx::Error, what: impl FnOnce() -> String) -> Self {
        let e = Self::from(e);
        if e.is_unique_violation() {
            Self::Conflict(what())
        } else {
            e
        }
    }
}
