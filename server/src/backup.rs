//! Backups of the whole library as plain files, and their restore (`isotint backup`,
//! `isotint restore`).
//!
//! A backup is a directory:
//!
//! ```text
//! manifest.json              format "isotint-backup", format_version 1, every calibration's id,
//!                            file, correction (supersedes), archived state and time of storing,
//!                            and every file's SHA-256 and length
//! calibrations/ID.json       each calibration's table file, byte for byte as stored (the format
//!                            of calibration-sets/)
//! audit.jsonl                the audit trail, oldest first, one JSON object per line
//! tokens.json                the tokens: name, role, SHA-256 of the token (never the token),
//!                            made, revoked
//! imports.json               the calibration-set files imported at service starts
//! ```
//!
//! Order maps are not backed up: they expire anyway. Every file is written before the manifest,
//! so a backup cut short has no manifest and is refused. A restore checks every file against
//! the manifest before it opens a transaction, then writes everything with its ids in one
//! transaction, into an empty database only. Restoring into a database that holds exactly the
//! backup already changes nothing and succeeds; any other non-empty database is refused, naming
//! a difference.

use std::collections::{HashMap, HashSet};
use std::fmt;
use std::io::Write;
use std::path::Path;

use anyhow::{bail, Context};
use isotint_core::CalibrationTable;
use serde::{Deserialize, Serialize};
use time::OffsetDateTime;

use crate::domain::CalibrationId;
use crate::storage::audit::AuditEvent;
use crate::storage::backup::{
    self as stored, Contents, ImportRecord, StoredCalibration, TokenRecord,
};
use crate::storage::calibrations::sha256_hex;
use crate::storage::Storage;

/// The `format` of a backup's manifest.
pub const FORMAT_TAG: &str = "isotint-backup";
/// The `format_version` this build writes and reads.
pub const FORMAT_VERSION: u32 = 1;
/// File name of the manifest in a backup directory.
pub const MANIFEST: &str = "manifest.json";
const AUDIT_FILE: &str = "audit.jsonl";
const TOKENS_FILE: &str = "tokens.json";
const IMPORTS_FILE: &str = "imports.json";
/// Calibrations read from the database at a time.
const PAGE: i64 = 100;

/// The manifest of a backup.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Manifest {
    /// Always [`FORMAT_TAG`].
    pub format: String,
    /// [`FORMAT_VERSION`] for backups this build writes.
    pub format_version: u32,
    /// When the backup was made (RFC 3339).
    #[serde(with = "time::serde::rfc3339")]
    pub made_at: OffsetDateTime,
    /// The program that made it, with its version.
    pub made_by: String,
    /// Every calibration, in order of id.
    pub calibrations: Vec<CalibrationEntry>,
    /// Every file of the backup but the manifest, in order of path.
    pub files: Vec<FileEntry>,
}

/// A calibration as the manifest lists it; its table is in `file`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CalibrationEntry {
    /// Its id, kept by a restore.
    pub id: CalibrationId,
    /// Its table file, `calibrations/ID.json`.
    pub file: String,
    /// The calibration it corrects (the one before it in its chain of versions).
    pub supersedes: Option<CalibrationId>,
    /// Hidden from lists.
    pub archived: bool,
    /// When it was stored (RFC 3339, to the millisecond).
    #[serde(with = "time::serde::rfc3339")]
    pub stored_at: OffsetDateTime,
}

/// A file of the backup, with what it must hash to.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FileEntry {
    /// Path inside the backup directory, `/`-separated.
    pub path: String,
    /// SHA-256 (hex) of its bytes.
    pub sha256: String,
    /// Its length, bytes.
    pub bytes: u64,
}

/// What a backup holds, or what a restore wrote.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Summary {
    /// Calibrations.
    pub calibrations: usize,
    /// Rows of the audit trail.
    pub audit_events: usize,
    /// Tokens, revoked ones too.
    pub tokens: usize,
    /// Imported calibration-set files.
    pub imports: usize,
}

impl fmt::Display for Summary {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{} calibrations, {} audit rows, {} tokens, {} imported files",
            self.calibrations, self.audit_events, self.tokens, self.imports
        )
    }
}

/// What [`restore`] did.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Restored {
    /// The database was empty; the backup was written into it.
    Written(Summary),
    /// The database held exactly this backup already; nothing was written.
    AlreadyPresent(Summary),
}

/// The path of a calibration's table file in a backup.
fn calibration_file(id: CalibrationId) -> String {
    format!("calibrations/{id}.json")
}

/// Where the files of a backup go: into a directory, or nowhere (only their checksums are
/// wanted, to compare a database with a backup).
enum Sink<'a> {
    Directory(&'a Path),
    Checksums,
}

impl Sink<'_> {
    /// Writes `bytes` as `path` (flushed to disk) and returns its manifest entry.
    fn put(&self, path: &str, bytes: &[u8]) -> anyhow::Result<FileEntry> {
        if let Sink::Directory(dir) = self {
            let target = dir.join(path);
            let mut file = std::fs::File::create(&target)
                .with_context(|| format!("could not create {}", target.display()))?;
            file.write_all(bytes)
                .and_then(|()| file.sync_all())
                .with_context(|| format!("could not write {}", target.display()))?;
        }
        Ok(FileEntry {
            path: path.to_string(),
            sha256: sha256_hex(bytes),
            bytes: bytes.len() as u64,
        })
    }
}

/// The audit trail as `audit.jsonl` holds it: one event per line, oldest first.
fn audit_lines(events: &[AuditEvent]) -> anyhow::Result<Vec<u8>> {
    let mut out = Vec::new();
    for event in events {
        serde_json::to_writer(&mut out, event)?;
        out.push(b'\n');
    }
    Ok(out)
}

/// Reads the whole library in one snapshot and puts its files into `sink`; the manifest that
/// lists them. Every list is in an order of its own (ids, names, checksums compared as bytes), so
/// the same library gives the same files from either database.
async fn library(storage: &Storage, sink: &Sink<'_>) -> anyhow::Result<(Manifest, Summary)> {
    let mut tx = stored::snapshot(storage).await?;
    let mut calibrations = Vec::new();
    let mut files = Vec::new();
    let mut after = String::new();
    loop {
        let page = stored::calibration_page(&mut tx, &after, PAGE).await?;
        let Some(last) = page.last() else { break };
        after = last.id.to_string();
        for c in page {
            let file = calibration_file(c.id);
            files.push(sink.put(&file, c.table_json.as_bytes())?);
            calibrations.push(CalibrationEntry {
                id: c.id,
                file,
                supersedes: c.supersedes,
                archived: c.archived,
                stored_at: c.stored_at,
            });
        }
    }
    let mut audit = stored::audit_trail(&mut tx).await?;
    audit.sort_by(|a, b| (a.at, &a.id).cmp(&(b.at, &b.id)));
    let mut tokens = stored::tokens(&mut tx).await?;
    tokens.sort_by(|a, b| a.name.as_str().cmp(b.name.as_str()));
    let mut imports = stored::imports(&mut tx).await?;
    imports.sort_by(|a, b| a.file_sha256.cmp(&b.file_sha256));
    tx.rollback().await?;

    files.push(sink.put(AUDIT_FILE, &audit_lines(&audit)?)?);
    files.push(sink.put(TOKENS_FILE, &serde_json::to_vec_pretty(&tokens)?)?);
    files.push(sink.put(IMPORTS_FILE, &serde_json::to_vec_pretty(&imports)?)?);
    calibrations.sort_by_key(|c| c.id.to_string());
    files.sort_by(|a, b| a.path.cmp(&b.path));
    let summary = Summary {
        calibrations: calibrations.len(),
        audit_events: audit.len(),
        tokens: tokens.len(),
        imports: imports.len(),
    };
    let manifest = Manifest {
        format: FORMAT_TAG.into(),
        format_version: FORMAT_VERSION,
        made_at: OffsetDateTime::now_utc(),
        made_by: format!("isotint {}", env!("CARGO_PKG_VERSION")),
        calibrations,
        files,
    };
    Ok((manifest, summary))
}

/// Writes a backup of the whole library into `out`, a new or empty directory: every file, then
/// the manifest (so a backup cut short has none). Errors name `--out` where the directory is at
/// fault.
pub async fn write(storage: &Storage, out: &Path) -> anyhow::Result<Summary> {
    if let Ok(mut entries) = std::fs::read_dir(out) {
        if entries.next().is_some() {
            bail!(
                "--out {}: the directory is not empty; a backup goes into a new or empty directory",
                out.display()
            );
        }
    }
    std::fs::create_dir_all(out.join("calibrations"))
        .with_context(|| format!("--out {}: could not create the directory", out.display()))?;
    let (manifest, summary) = library(storage, &Sink::Directory(out)).await?;
    let partial = out.join(format!("{MANIFEST}.partial"));
    Sink::Directory(out).put(
        &format!("{MANIFEST}.partial"),
        &serde_json::to_vec_pretty(&manifest)?,
    )?;
    std::fs::rename(&partial, out.join(MANIFEST))
        .with_context(|| format!("could not write {}", out.join(MANIFEST).display()))?;
    Ok(summary)
}

/// A backup checked against its manifest, ready to be written.
struct Checked {
    /// The calibrations, each after the one it corrects.
    calibrations: Vec<CalibrationEntry>,
    audit: Vec<AuditEvent>,
    tokens: Vec<TokenRecord>,
    imports: Vec<ImportRecord>,
}

impl Checked {
    fn summary(&self) -> Summary {
        Summary {
            calibrations: self.calibrations.len(),
            audit_events: self.audit.len(),
            tokens: self.tokens.len(),
            imports: self.imports.len(),
        }
    }
}

/// Reads the manifest of the backup in `from`.
fn read_manifest(from: &Path) -> anyhow::Result<Manifest> {
    let path = from.join(MANIFEST);
    let bytes = std::fs::read(&path).with_context(|| {
        format!(
            "--from {}: {MANIFEST} is missing or unreadable (not a backup, or one cut short)",
            from.display()
        )
    })?;
    let manifest: Manifest = serde_json::from_slice(&bytes)
        .with_context(|| format!("{MANIFEST}: not a backup manifest"))?;
    if manifest.format != FORMAT_TAG {
        bail!(
            "{MANIFEST}: format {:?} is not an isotint backup ({FORMAT_TAG:?})",
            manifest.format
        );
    }
    if manifest.format_version != FORMAT_VERSION {
        bail!(
            "{MANIFEST}: format_version {} is not one this isotint reads ({FORMAT_VERSION})",
            manifest.format_version
        );
    }
    Ok(manifest)
}

/// The bytes of the backup's file `entry`, checked against its length and checksum.
fn read_checked(from: &Path, entry: &FileEntry) -> anyhow::Result<Vec<u8>> {
    let bytes = std::fs::read(from.join(&entry.path))
        .with_context(|| format!("{}: missing from the backup or unreadable", entry.path))?;
    if bytes.len() as u64 != entry.bytes || sha256_hex(&bytes) != entry.sha256 {
        bail!(
            "{}: checksum mismatch: the file is damaged or was changed after the backup",
            entry.path
        );
    }
    Ok(bytes)
}

/// A calibration's table, parsed from its checked file.
fn read_table(from: &Path, entry: &FileEntry) -> anyhow::Result<(String, CalibrationTable)> {
    let bytes = read_checked(from, entry)?;
    let table = CalibrationTable::from_json(&bytes)
        .with_context(|| format!("{}: not a usable calibration file", entry.path))?;
    let text = String::from_utf8(bytes).with_context(|| format!("{}: not UTF-8", entry.path))?;
    Ok((text, table))
}

/// A JSON file of the backup.
fn read_json<T: serde::de::DeserializeOwned>(from: &Path, entry: &FileEntry) -> anyhow::Result<T> {
    serde_json::from_slice(&read_checked(from, entry)?)
        .with_context(|| format!("{}: not valid", entry.path))
}

/// The calibrations in an order a database accepts: each after the one it corrects. Refuses a
/// correction of a calibration the backup lacks, two corrections of one calibration, and loops.
fn in_chain_order(entries: &[CalibrationEntry]) -> anyhow::Result<Vec<CalibrationEntry>> {
    let ids: HashSet<CalibrationId> = entries.iter().map(|c| c.id).collect();
    let mut correction: HashMap<CalibrationId, &CalibrationEntry> = HashMap::new();
    for c in entries {
        let Some(old) = c.supersedes else { continue };
        if !ids.contains(&old) {
            bail!(
                "{MANIFEST}: calibration {} corrects {old}, which the backup does not hold",
                c.id
            );
        }
        if let Some(other) = correction.insert(old, c) {
            bail!(
                "{MANIFEST}: calibrations {} and {} both correct {old}",
                other.id,
                c.id
            );
        }
    }
    let mut ordered = Vec::with_capacity(entries.len());
    for root in entries.iter().filter(|c| c.supersedes.is_none()) {
        let mut next = Some(root);
        while let Some(c) = next {
            ordered.push(c.clone());
            next = correction.get(&c.id).copied();
        }
    }
    if ordered.len() != entries.len() {
        bail!("{MANIFEST}: the corrections of some calibrations form a loop");
    }
    Ok(ordered)
}

/// Checks the backup in `from` against its manifest: every file present with its checksum,
/// every calibration file a usable table, every other file valid and every reference inside
/// the backup. The error names the file at fault.
fn check(from: &Path, manifest: &Manifest) -> anyhow::Result<Checked> {
    let mut files: HashMap<&str, &FileEntry> = HashMap::new();
    for entry in &manifest.files {
        if files.insert(&entry.path, entry).is_some() {
            bail!("{MANIFEST}: {} is listed twice", entry.path);
        }
    }
    let file = |path: &str| {
        files
            .get(path)
            .copied()
            .with_context(|| format!("{MANIFEST}: {path} is not listed"))
    };
    let mut expected: HashSet<String> = [AUDIT_FILE, TOKENS_FILE, IMPORTS_FILE]
        .map(String::from)
        .into();
    let mut contents: HashMap<String, CalibrationId> = HashMap::new();
    for c in &manifest.calibrations {
        if c.file != calibration_file(c.id) || !expected.insert(c.file.clone()) {
            bail!(
                "{MANIFEST}: calibration {} must be listed once, in {}",
                c.id,
                calibration_file(c.id)
            );
        }
        let entry = file(&c.file)?;
        read_table(from, entry)?;
        if let Some(other) = contents.insert(entry.sha256.clone(), c.id) {
            bail!("{}: the same table as calibration {other}", c.file);
        }
    }
    if let Some(stray) = manifest.files.iter().find(|f| !expected.contains(&f.path)) {
        bail!(
            "{MANIFEST}: {} is not a file of an isotint backup",
            stray.path
        );
    }
    let ids: HashSet<CalibrationId> = contents.into_values().collect();
    let known = |id: &Option<String>| {
        id.as_deref()
            .is_none_or(|t| t.parse().is_ok_and(|id| ids.contains(&id)))
    };

    let audit_bytes = read_checked(from, file(AUDIT_FILE)?)?;
    let mut audit = Vec::new();
    let mut audit_ids = HashSet::new();
    for (n, line) in audit_bytes.split(|b| *b == b'\n').enumerate() {
        if line.is_empty() {
            continue;
        }
        let event: AuditEvent = serde_json::from_slice(line)
            .with_context(|| format!("{AUDIT_FILE} line {}: not an audit row", n + 1))?;
        if !known(&event.calibration_id) || !audit_ids.insert(event.id.clone()) {
            bail!(
                "{AUDIT_FILE} line {}: a repeated row, or one naming a calibration the backup \
                 does not hold",
                n + 1
            );
        }
        audit.push(event);
    }
    let tokens: Vec<TokenRecord> = read_json(from, file(TOKENS_FILE)?)?;
    let imports: Vec<ImportRecord> = read_json(from, file(IMPORTS_FILE)?)?;
    if let Some(i) = imports.iter().find(|i| !ids.contains(&i.calibration_id)) {
        bail!(
            "{IMPORTS_FILE}: {} names calibration {}, which the backup does not hold",
            i.file_name,
            i.calibration_id
        );
    }
    Ok(Checked {
        calibrations: in_chain_order(&manifest.calibrations)?,
        audit,
        tokens,
        imports,
    })
}

/// Restores the backup in `from` into the database, keeping every id. The whole backup is
/// checked first (a damaged one is refused naming the file, before the database is touched),
/// then written in one transaction into an empty database. A database that holds exactly this
/// backup already is left as it is ([`Restored::AlreadyPresent`]); any other non-empty database
/// is refused, naming a difference.
pub async fn restore(storage: &Storage, from: &Path) -> anyhow::Result<Restored> {
    let manifest = read_manifest(from)?;
    let checked = check(from, &manifest)?;
    let files: HashMap<&str, &FileEntry> = manifest
        .files
        .iter()
        .map(|f| (f.path.as_str(), f))
        .collect();
    let mut tx = stored::begin_restore(storage).await?;
    let contents = stored::contents(&mut tx).await?;
    if !contents.is_empty() {
        tx.rollback().await?;
        let (present, _) = library(storage, &Sink::Checksums).await?;
        return match difference(&manifest, &present) {
            None => Ok(Restored::AlreadyPresent(checked.summary())),
            Some(why) => bail!(
                "--database: the database is not empty ({}) and does not hold this backup: \
                 {why}; restore into an empty database",
                counted(&contents)
            ),
        };
    }
    for c in &checked.calibrations {
        let entry = files[c.file.as_str()];
        let (table_json, table) = read_table(from, entry)?;
        let calibration = StoredCalibration {
            id: c.id,
            table_json,
            supersedes: c.supersedes,
            archived: c.archived,
            stored_at: c.stored_at,
        };
        stored::restore_calibration(&mut tx, &calibration, &table, &entry.sha256).await?;
    }
    for import in &checked.imports {
        stored::restore_import(&mut tx, import).await?;
    }
    for token in &checked.tokens {
        stored::restore_token(&mut tx, token).await?;
    }
    for event in &checked.audit {
        stored::restore_audit_event(&mut tx, event).await?;
    }
    tx.commit().await?;
    Ok(Restored::Written(checked.summary()))
}

/// The counts of a non-empty database, in words.
fn counted(c: &Contents) -> String {
    format!(
        "{} calibrations, {} audit rows, {} tokens, {} imported files",
        c.calibrations, c.audit_events, c.tokens, c.imports
    )
}

/// The first way in which the library `present` in a database differs from the `backup`, in
/// words; `None` when it holds exactly the backup.
fn difference(backup: &Manifest, present: &Manifest) -> Option<String> {
    let checksums = |m: &Manifest| -> HashMap<String, String> {
        m.files
            .iter()
            .map(|f| (f.path.clone(), f.sha256.clone()))
            .collect()
    };
    let (backup_sums, present_sums) = (checksums(backup), checksums(present));
    let present_by_id: HashMap<CalibrationId, &CalibrationEntry> =
        present.calibrations.iter().map(|c| (c.id, c)).collect();
    for c in &backup.calibrations {
        let Some(p) = present_by_id.get(&c.id) else {
            return Some(format!(
                "calibration {} of the backup is not in the database",
                c.id
            ));
        };
        let why = if backup_sums.get(&c.file) != present_sums.get(&p.file) {
            "has another table"
        } else if c.supersedes != p.supersedes {
            "corrects another calibration"
        } else if c.archived != p.archived {
            "is archived in one and listed in the other"
        } else if c.stored_at != p.stored_at {
            "was stored at another time"
        } else {
            continue;
        };
        return Some(format!("calibration {} {why} in the database", c.id));
    }
    let backup_ids: HashSet<CalibrationId> = backup.calibrations.iter().map(|c| c.id).collect();
    if let Some(extra) = present
        .calibrations
        .iter()
        .find(|p| !backup_ids.contains(&p.id))
    {
        return Some(format!(
            "the database holds calibration {}, which the backup does not",
            extra.id
        ));
    }
    [
        (AUDIT_FILE, "the audit trail differs from the backup's"),
        (TOKENS_FILE, "the tokens differ from the backup's"),
        (IMPORTS_FILE, "the imported files differ from the backup's"),
    ]
    .into_iter()
    .find(|(file, _)| backup_sums.get(*file) != present_sums.get(*file))
    .map(|(_, why)| why.to_string())
}
