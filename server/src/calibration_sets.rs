//! Import of the `calibration-sets/` directory at start: every `*.json` table file is stored
//! once. A file already imported (same SHA-256 of its bytes) is skipped, so restarts and
//! several replicas starting together import nothing twice.

use std::path::{Path, PathBuf};

use isotint_core::CalibrationTable;

use crate::domain::check_metadata;
use crate::storage::calibrations::{self, sha256_hex, ImportedFile};
use crate::storage::{Storage, StorageResult};

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
    for path in paths {
        let bytes = match tokio::fs::read(&path).await {
            Ok(b) => b,
            Err(e) => {
                summary.refused.push((path, e.to_string()));
                continue;
            }
        };
        let sha = sha256_hex(&bytes);
        if calibrations::imported_file(storage, &sha).await?.is_some() {
            summary.already_known += 1;
            continue;
        }
        let parsed = CalibrationTable::from_json(&bytes).and_then(|t| {
            check_metadata(&t.metadata)?;
            Ok(t)
        });
        let table = match parsed {
            Ok(t) => t,
            Err(e) => {
                tracing::warn!(file = %path.display(), error = %e, "calibration file refused");
                summary.refused.push((path, e.to_string()));
                continue;
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
        let text = String::from_utf8_lossy(&bytes);
        let inserted = calibrations::insert(storage, &table, &text, None, Some(file)).await?;
        if inserted.created {
            tracing::info!(file = %name, id = %inserted.row.id, "calibration imported");
            summary.imported += 1;
        } else {
            summary.already_known += 1;
        }
    }
    Ok(summary)
}
