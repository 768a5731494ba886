//! Persistence through `sqlx::Any`: SQLite (default, WAL mode, foreign keys on) or PostgreSQL,
//! with the same portable SQL. Every statement lives in a small named function of the
//! submodules; every multi-statement write runs in one transaction.

pub mod calibrations;
pub mod order_maps;

use std::time::Duration;

use sqlx::any::{AnyPoolOptions, AnyRow};
use sqlx::migrate::MigrateDatabase;
use sqlx::{Any, AnyPool, Row};
use thiserror::Error;

/// The migrations in `migrations/`, embedded at build time.
pub static MIGRATOR: sqlx::migrate::Migrator = sqlx::migrate!("./migrations");

/// Which database server is behind the pool.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Backend {
    /// SQLite file.
    Sqlite,
    /// PostgreSQL server.
    Postgres,
}

impl Backend {
    /// Name as reported by the health endpoint.
    pub fn name(self) -> &'static str {
        match self {
            Backend::Sqlite => "sqlite",
            Backend::Postgres => "postgres",
        }
    }

    fn from_url(url: &str) -> Result<Backend, StorageError> {
        if url.starts_with("sqlite:") {
            Ok(Backend::Sqlite)
        } else if url.starts_with("postgres:") || url.starts_with("postgresql:") {
            Ok(Backend::Postgres)
        } else {
            Err(StorageError::UnsupportedUrl)
        }
    }
}

/// Everything the storage layer can fail with.
#[derive(Debug, Error)]
pub enum StorageError {
    /// No row with that id (or it was purged).
    #[error("no {what} with id {id}")]
    NotFound {
        /// What was looked for ("calibration", "order map").
        what: &'static str,
        /// The id asked for.
        id: String,
    },
    /// The write contradicts a stored row (e.g. a calibration corrected twice).
    #[error("{0}")]
    Conflict(String),
    /// A stored value could not be read back (a bug or a hand-edited database).
    #[error("stored data is corrupt: {0}")]
    Corrupt(String),
    /// The database URL names neither SQLite nor PostgreSQL.
    #[error("the database URL must start with sqlite: or postgres:")]
    UnsupportedUrl,
    /// The database refused or failed.
    #[error("database error: {0}")]
    Database(#[from] sqlx::Error),
    /// Applying migrations failed.
    #[error("migration failed: {0}")]
    Migrate(#[from] sqlx::migrate::MigrateError),
}

/// Shorthand for results of this module.
pub type StorageResult<T> = Result<T, StorageError>;

/// A connection pool plus the backend it talks to. Cheap to clone.
#[derive(Debug, Clone)]
pub struct Storage {
    pool: AnyPool,
    backend: Backend,
}

impl Storage {
    /// Connects (creating a missing SQLite file), switches SQLite to WAL mode and applies
    /// pending migrations.
    pub async fn connect(url: &str) -> StorageResult<Storage> {
        sqlx::any::install_default_drivers();
        let backend = Backend::from_url(url)?;
        if backend == Backend::Sqlite && !Any::database_exists(url).await? {
            Any::create_database(url).await?;
        }
        let pool = AnyPoolOptions::new()
            .max_connections(8)
            .acquire_timeout(Duration::from_secs(30))
            .connect(url)
            .await?;
        if backend == Backend::Sqlite {
            enable_wal(&pool).await?;
        }
        MIGRATOR.run(&pool).await?;
        Ok(Storage { pool, backend })
    }

    /// The backend behind the pool.
    pub fn backend(&self) -> Backend {
        self.backend
    }

    /// The pool, for the query functions of the submodules.
    pub fn pool(&self) -> &AnyPool {
        &self.pool
    }

    /// Checks that the database answers.
    pub async fn ping(&self) -> StorageResult<()> {
        sqlx::query("SELECT 1").execute(&self.pool).await?;
        Ok(())
    }

    /// Closes every connection (waits for checked-out ones).
    pub async fn close(&self) {
        self.pool.close().await;
    }
}

async fn enable_wal(pool: &AnyPool) -> StorageResult<()> {
    sqlx::query("PRAGMA journal_mode = WAL")
        .execute(pool)
        .await?;
    Ok(())
}

/// Whether `e` is a unique-constraint violation.
fn is_unique_violation(e: &sqlx::Error) -> bool {
    e.as_database_error()
        .is_some_and(|d| d.is_unique_violation())
}

/// Reads a text column that holds JSON.
fn json_column<T: serde::de::DeserializeOwned>(row: &AnyRow, column: &str) -> StorageResult<T> {
    let text: String = row.try_get(column)?;
    serde_json::from_str(&text).map_err(|e| StorageError::Corrupt(format!("{column}: {e}")))
}
