//! Persistence through `sqlx::Any`: SQLite (default, WAL mode, foreign keys on) or PostgreSQL,
//! with the same portable SQL. Every statement lives in a small named function of the
//! submodules; every multi-statement write runs in one transaction.
//!
//! Writes go through [`Storage::writer`]. On SQLite that is a pool of one connection: SQLite
//! lets one writer in at a time, and a transaction that reads and then writes fails at once
//! with "database is locked" when another writer got in between, whatever the busy time-out.
//! With one write connection, concurrent writes queue in arrival order instead (up to the pool's
//! acquire time-out; past it, or when another process holds the lock past the busy time-out,
//! the error is [`StorageError::Busy`]). Reads use the other connections and, in WAL mode,
//! never wait for the writer. PostgreSQL takes concurrent writers itself: there the writer is
//! the common pool.

pub mod audit;
pub mod backup;
pub mod calibrations;
pub mod order_maps;
pub mod tokens;

use std::time::Duration;

use sqlx::any::{AnyPoolOptions, AnyRow};
use sqlx::migrate::MigrateDatabase;
use sqlx::{Any, AnyPool, Executor, Row};
use thiserror::Error;

use crate::domain::CalibrationId;

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
    /// A correction of a calibration that is corrected already: corrections form a chain, and
    /// only its latest version may be corrected.
    #[error(
        "calibration {id} is already superseded by {by}; correct the latest version, {latest}, \
         instead"
    )]
    Superseded {
        /// The calibration asked to be corrected.
        id: CalibrationId,
        /// The calibration that corrects it.
        by: CalibrationId,
        /// The latest version of its chain of corrections, the one to correct.
        latest: CalibrationId,
    },
    /// A stored value could not be read back (a bug or a hand-edited database).
    #[error("stored data is corrupt: {0}")]
    Corrupt(String),
    /// The database URL names neither SQLite nor PostgreSQL.
    #[error("the database URL must start with sqlite: or postgres:")]
    UnsupportedUrl,
    /// The database stayed busy (locked by another writer, or no connection free) past its
    /// time-out; retrying later may succeed.
    #[error("the database is busy: {0}")]
    Busy(sqlx::Error),
    /// The database refused or failed.
    #[error("database error: {0}")]
    Database(sqlx::Error),
    /// Applying migrations failed.
    #[error("migration failed: {0}")]
    Migrate(#[from] sqlx::migrate::MigrateError),
}

impl StorageError {
    /// Short name of the kind of error, as the metrics count it: `busy` (retry later),
    /// `fault` (the database refused or failed), `corrupt`, `migration`, `configuration`,
    /// `not_found`, `conflict`.
    pub fn kind(&self) -> &'static str {
        match self {
            StorageError::NotFound { .. } => "not_found",
            StorageError::Conflict(_) | StorageError::Superseded { .. } => "conflict",
            StorageError::Corrupt(_) => "corrupt",
            StorageError::UnsupportedUrl => "configuration",
            StorageError::Busy(_) => "busy",
            StorageError::Database(_) => "fault",
            StorageError::Migrate(_) => "migration",
        }
    }
}

/// Error codes that mean "busy, try again": SQLite's BUSY and LOCKED with their extended
/// codes, PostgreSQL's serialization failure, deadlock and lock-not-available.
const BUSY_CODES: [&str; 9] = [
    "5", "6", "261", "262", "517", "773", "40001", "40P01", "55P03",
];

impl From<sqlx::Error> for StorageError {
    fn from(e: sqlx::Error) -> Self {
        let busy_code = e
            .as_database_error()
            .and_then(|d| d.code())
            .is_some_and(|code| BUSY_CODES.contains(&code.as_ref()));
        if busy_code || matches!(e, sqlx::Error::PoolTimedOut) {
            StorageError::Busy(e)
        } else {
            StorageError::Database(e)
        }
    }
}

/// Shorthand for results of this module.
pub type StorageResult<T> = Result<T, StorageError>;

/// A connection pool plus the backend it talks to. Cheap to clone.
#[derive(Debug, Clone)]
pub struct Storage {
    pool: AnyPool,
    writer: AnyPool,
    backend: Backend,
}

/// How long SQLite waits for a lock held by another connection or process before it answers
/// "busy".
const SQLITE_BUSY_TIMEOUT: Duration = Duration::from_secs(10);

/// A pool of at most `connections` connections; SQLite connections wait
/// [`SQLITE_BUSY_TIMEOUT`] on locks.
async fn open_pool(url: &str, backend: Backend, connections: u32) -> StorageResult<AnyPool> {
    let options = AnyPoolOptions::new()
        .max_connections(connections)
        .acquire_timeout(Duration::from_secs(30));
    let options = match backend {
        Backend::Sqlite => options.after_connect(|conn, _| {
            Box::pin(async move {
                let pragma = format!("PRAGMA busy_timeout = {}", SQLITE_BUSY_TIMEOUT.as_millis());
                conn.execute(pragma.as_str()).await?;
                Ok(())
            })
        }),
        Backend::Postgres => options,
    };
    Ok(options.connect(url).await?)
}

impl Storage {
    /// Connects (creating a missing SQLite file), switches SQLite to WAL mode, opens its single
    /// write connection, applies pending migrations, fills the stress inputs of calibrations stored
    /// before they had columns (`calibrations::fill_stress_defaults`) and converts order maps
    /// stored before bands existed (`order_maps::convert_legacy`).
    pub async fn connect(url: &str) -> StorageResult<Storage> {
        sqlx::any::install_default_drivers();
        let backend = Backend::from_url(url)?;
        if backend == Backend::Sqlite && !Any::database_exists(url).await? {
            Any::create_database(url).await?;
        }
        let pool = open_pool(url, backend, 8).await?;
        let writer = match backend {
            Backend::Sqlite => {
                enable_wal(&pool).await?;
                open_pool(url, backend, 1).await?
            }
            Backend::Postgres => pool.clone(),
        };
        MIGRATOR.run(&writer).await?;
        let storage = Storage {
            pool,
            writer,
            backend,
        };
        let filled = calibrations::fill_stress_defaults(&storage).await?;
        if filled > 0 {
            tracing::info!(
                filled,
                "stress inputs of calibrations stored before filled in"
            );
        }
        let converted = order_maps::convert_legacy(&storage).await?;
        if converted > 0 {
            tracing::info!(
                converted,
                "order maps stored before bands converted to bands"
            );
        }
        Ok(storage)
    }

    /// The backend behind the pool.
    pub fn backend(&self) -> Backend {
        self.backend
    }

    /// The pool for reads, for the query functions of the submodules.
    pub fn pool(&self) -> &AnyPool {
        &self.pool
    }

    /// The pool for writes (and the reads inside write transactions): one connection on
    /// SQLite, so that writes queue instead of failing; see the module documentation.
    pub fn writer(&self) -> &AnyPool {
        &self.writer
    }

    /// Checks that the database answers.
    pub async fn ping(&self) -> StorageResult<()> {
        sqlx::query("SELECT 1").execute(&self.pool).await?;
        Ok(())
    }

    /// Closes every connection (waits for checked-out ones).
    pub async fn close(&self) {
        self.writer.close().await;
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
