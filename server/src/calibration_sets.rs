//! Import of calibration sets at start: the sets built into the binary, then every `*.json`
//! table file of the `calibration-sets/` directory. A file already imported (same SHA-256 of its
//! bytes) is skipped, so restarts and several replicas starting together import nothing twice.

use std::path::{Path, PathBuf};

use isotint_core::CalibrationTable;

use crate::access::{Actor, Origin};
use crate::domain::check_metadata;
use crate::storage::audit::AuditAction;
use crate::storage::calibrations::{self, sha256_hex, ImportedFile};
use crate::storage::{Storage, StorageResult};

/// Calibration sets built into the binary, as (file name, file bytes): the bundled demo set of
/// `calibration-sets/`, so that a service started from any directory offers it.
pub const BUILT_IN: &[(&str, &[u8])] = &[(
    "birchfield-epoxy-halogen.json",
    include_bytes!("../../calibration-sets/birchfield-epoxy-halogen.json"),
)];

/// Where the sets of [`import_built_in`] come from, in logs.
pub const BUILT_IN_SOURCE: &str = "built into the binary";

/// What an import run did.
#[derive(Debug, Default, Clone)]
pub struct ImportSummary {
    /// Files stored as new calibrations.
    pub imported: usize,
    /// Files imported before, or whose table was already stored.
    pub already_known: usize,
    /// Files that are not valid calibration tables, with the reason.
    pub refused: Vec<(PathBuf, String)>,
}

/// Imports the sets built into the binary ([`BUILT_IN`]); each is stored once, like a file of
/// the calibration-sets directory with the same bytes.
pub async fn import_built_in(storage: &Storage) -> StorageResult<ImportSummary> {
    let mut summary = ImportSummary::default();
    for (name, bytes) in BUILT_IN {
        import_file(
            storage,
            Path::new(name),
            bytes,
            BUILT_IN_SOURCE,
            &mut summary,
        )
        .await?;
    }
    Ok(summary)
}

/// Imports what a starting service offers: the sets built into the binary, then the files of
/// `dir` if one is configured; logs at INFO what each source gave.
pub async fn import_at_start(storage: &Storage, dir: Option<&Path>) -> StorageResult<()> {
    log_summary(BUILT_IN_SOURCE, &import_built_in(storage).await?);
    if let Some(dir) = dir {
        log_summary(&dir.display().to_string(), &import_dir(storage, dir).await?);
    }
    Ok(())
}

fn log_summary(source: &str, summary: &ImportSummary) {
    tracing::info!(
        from = source,
        imported = summary.imported,
        already_known = summary.already_known,
        refused = summary.refused.len(),
        "calibration sets imported"
    );
}

/// Imports every `*.json` file of `dir` (in name order). A missing directory imports nothing.
/// Invalid files are logged and listed in the summary; database failures abort the run.
pub async fn import_dir(storage: &Storage, dir: &Path) -> StorageResult<ImportSummary> {
    let mut summary = ImportSummary::default();
    let mut paths: Vec<PathBuf> = match std::fs::read_dir(dir) {
        Ok(entries) => entries
            .filter_map(|e| e.ok().map(|e| e.path()))
            .filter(|p| {
                p.extension()
                    .is_some_and(|x| x.eq_ignore_ascii_case("json"))
            })
            .collect(),
        Err(e) => {
            tracing::info!(dir = %dir.display(), error = %e, "no calibration sets imported");
            return Ok(summary);
        }
    };
    paths.sort();
    let source = dir.display().to_string();
    for path in paths {
        match tokio::fs::read(&path).await {
            Ok(bytes) => import_file(storage, &path, &bytes, &source, &mut summary).await?,
            Err(e) => summary.refused.push((path, e.to_string())),
        }
    }
    Ok(summary)
}

/// Stores one table file read from `source` unless a file with the same bytes was imported
/// before; counts the outcome in `summary`.
async fn import_file(
    storage: &Storage,
    path: &Path,
    bytes: &[u8],
    source: &str,
    summary: &mut ImportSummary,
) -> StorageResult<()> {
    let sha = sha256_hex(bytes);
    if calibrations::imported_file(storage, &sha).await?.is_some() {
        summary.already_known += 1;
        return Ok(());
    }
    let parsed = CalibrationTable::from_json(bytes).and_then(|t| {
        check_metadata(&t.metadata)?;
        Ok(t)
    });
    let table = match parsed {
        Ok(t) => t,
        Err(e) => {
            tracing::warn!(file = %path.display(), error = %e, "calibration file refused");
            summary.refused.push((path.to_path_buf(), e.to_string()));
            return Ok(());
        }
    };
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let file = ImportedFile {
        name: &name,
        sha256: &sha,
    };
    // from_json accepted the bytes, so they are UTF-8.
    let text = String::from_utf8_lossy(bytes);
    let origin = Origin::local(Actor::ServiceStart);
    let change = (&origin, AuditAction::Import);
    let inserted = calibrations::insert(storage, &table, &text, None, Some(file), change).await?;
    if inserted.created {
        tracing::info!(file = %name, from = source, id = %inserted.row.id, "calibration imported");
        summary.imported += 1;
    } else {
        summary.already_known += 1;
    }
    Ok(())
}
