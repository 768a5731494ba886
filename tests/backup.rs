//! `isotint backup` and `isotint restore`: the whole library (calibrations with their ids,
//! corrections and archived state, the audit trail, the tokens) goes from one database to
//! another, SQLite to PostgreSQL and back when `ISOTINT_TEST_POSTGRES_URL` is set; a restore
//! into a database that already holds the backup changes nothing; a non-empty database with
//! other content and a damaged backup are refused naming the problem, with nothing written.

mod common;

use std::future::Future;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use common::PostgresDatabase;
use isotint::access::{Actor, Origin, Role, Token, TokenName};
use isotint::backup::{self, Manifest, Restored, Summary, MANIFEST};
use isotint::calibration_sets::import_built_in;
use isotint::domain::CalibrationId;
use isotint::storage::audit::{self, AuditAction, AuditEvent};
use isotint::storage::calibrations::{self, CalibrationRow, ListFilter};
use isotint::storage::{tokens, Storage};

/// A database for one test: a SQLite file, or a fresh PostgreSQL database.
enum Database {
    Sqlite(tempfile::TempDir),
    Postgres(PostgresDatabase),
}

impl Database {
    fn sqlite() -> Database {
        Database::Sqlite(tempfile::tempdir().unwrap())
    }

    fn url(&self) -> String {
        match self {
            Database::Sqlite(dir) => {
                format!(
                    "sqlite://{}?mode=rwc",
                    dir.path().join("db.sqlite").display()
                )
            }
            Database::Postgres(db) => db.url.clone(),
        }
    }

    async fn open(&self) -> Storage {
        Storage::connect(&self.url()).await.unwrap()
    }

    async fn drop_database(self) {
        if let Database::Postgres(db) = self {
            db.drop_database().await;
        }
    }
}

/// Pairs of (source, target) databases: SQLite to SQLite, and with PostgreSQL configured,
/// SQLite to PostgreSQL and PostgreSQL to SQLite.
async fn database_pairs() -> Vec<(&'static str, Database, Database)> {
    let mut pairs = vec![("SQLite to SQLite", Database::sqlite(), Database::sqlite())];
    match (
        PostgresDatabase::create().await,
        PostgresDatabase::create().await,
    ) {
        (Some(a), Some(b)) => {
            pairs.push((
                "SQLite to PostgreSQL",
                Database::sqlite(),
                Database::Postgres(a),
            ));
            pairs.push((
                "PostgreSQL to SQLite",
                Database::Postgres(b),
                Database::sqlite(),
            ));
        }
        _ => eprintln!("ISOTINT_TEST_POSTGRES_URL not set: PostgreSQL variants skipped"),
    }
    pairs
}

fn by_hand() -> Origin {
    Origin::local(Actor::CommandLine)
}

/// What a library holds, as the service reads it back (in order of id, which both databases
/// sort alike only when told to in the same way).
#[derive(Debug, PartialEq)]
struct Library {
    calibrations: Vec<CalibrationRow>,
    tables: Vec<String>,
    audit: Vec<AuditEvent>,
    tokens: Vec<tokens::TokenRow>,
}

async fn library(storage: &Storage) -> Library {
    let filter = ListFilter {
        text: None,
        include_archived: true,
    };
    let mut calibrations = calibrations::list(storage, &filter, None, 500)
        .await
        .unwrap();
    calibrations.sort_by_key(|c| c.id.to_string());
    let mut tables = Vec::new();
    for c in &calibrations {
        tables.push(calibrations::table_json(storage, c.id).await.unwrap());
    }
    let mut audit = audit::page(storage, None, None, 500).await.unwrap();
    audit.sort_by(|a, b| a.id.cmp(&b.id));
    Library {
        calibrations,
        tables,
        audit,
        tokens: tokens::list(storage).await.unwrap(),
    }
}

/// Imports a rendered table named `name` (a correction of `supersedes` if given); its id.
async fn store(storage: &Storage, name: &str, supersedes: Option<CalibrationId>) -> CalibrationId {
    let table = common::table(name);
    let origin = by_hand();
    let stored = calibrations::insert(
        storage,
        &table,
        &table.to_json(),
        supersedes,
        None,
        (&origin, AuditAction::Import),
    )
    .await
    .unwrap();
    stored.row.id
}

/// Fills `storage` with a small library: the built-in demo set, a table and its correction (the
/// first one archived), a token in use and a revoked one. Returns the live token.
async fn fill(storage: &Storage) -> Token {
    import_built_in(storage).await.unwrap();
    let first = store(storage, "BT-7 strip, first pour", None).await;
    store(storage, "BT-7 strip, second pour", Some(first)).await;
    calibrations::set_archived(storage, first, true, &by_hand())
        .await
        .unwrap();
    let live = Token::generate().unwrap();
    let name: TokenName = "bay-reader".parse().unwrap();
    tokens::create(storage, &name, Role::Reader, &live.sha256(), &by_hand())
        .await
        .unwrap();
    let gone: TokenName = "old-admin".parse().unwrap();
    let revoked = Token::generate().unwrap();
    tokens::create(storage, &gone, Role::Admin, &revoked.sha256(), &by_hand())
        .await
        .unwrap();
    tokens::revoke(storage, &gone, &by_hand()).await.unwrap();
    live
}

fn manifest(dir: &Path) -> Manifest {
    serde_json::from_slice(&std::fs::read(dir.join(MANIFEST)).unwrap()).unwrap()
}

/// One source database filled with a library and backed up, and one empty target database.
struct Case {
    /// Which way, e.g. "SQLite to PostgreSQL".
    way: &'static str,
    /// The source, filled by [`fill`].
    from: Storage,
    /// The target, empty.
    to: Storage,
    /// The backup of the source.
    backup: PathBuf,
    /// What the backup holds.
    written: Summary,
    /// The source's live token.
    live: Token,
}

/// Runs `check` on every pair of [`database_pairs`], with the source filled and backed up.
async fn on_every_pair<F, Fut>(check: F)
where
    F: Fn(Case) -> Fut,
    Fut: Future<Output = ()>,
{
    for (way, source, target) in database_pairs().await {
        let from = source.open().await;
        let live = fill(&from).await;
        let dir = tempfile::tempdir().unwrap();
        let backup = dir.path().join("backup");
        let written = backup::write(&from, &backup).await.unwrap();
        let to = target.open().await;
        check(Case {
            way,
            from: from.clone(),
            to: to.clone(),
            backup,
            written,
            live,
        })
        .await;
        from.close().await;
        to.close().await;
        source.drop_database().await;
        target.drop_database().await;
    }
}

#[tokio::test]
async fn a_restored_backup_holds_every_calibration_id_chain_archive_token_and_audit_row_on_either_database(
) {
    on_every_pair(
        |Case {
             way,
             from,
             to,
             backup,
             written,
             live,
         }| async move {
            // 3 stored (the built-in set, a table, its correction), 1 archived, 2 tokens made, 1
            // revoked: 7 changes, each with its audit row.
            let expected = Summary {
                calibrations: 3,
                audit_events: 7,
                tokens: 2,
                imports: 1,
            };
            assert_eq!(written, expected, "{way}");

            let restored = backup::restore(&to, &backup).await.unwrap();
            assert_eq!(restored, Restored::Written(written), "{way}");
            assert_eq!(library(&to).await, library(&from).await, "{way}");
            let found = tokens::active(&to, &live.sha256()).await.unwrap();
            assert_eq!(found.map(|t| t.role), Some(Role::Reader), "{way}");

            // The restored database backs up to the same files.
            let dir = tempfile::tempdir().unwrap();
            backup::write(&to, dir.path()).await.unwrap();
            let (first, second) = (manifest(&backup), manifest(dir.path()));
            assert_eq!(first.calibrations, second.calibrations, "{way}");
            assert_eq!(first.files, second.files, "{way}");
        },
    )
    .await;
}

#[tokio::test]
async fn restoring_the_same_backup_twice_changes_nothing_and_says_it_is_already_present() {
    on_every_pair(
        |Case {
             way,
             to,
             backup,
             written,
             ..
         }| async move {
            backup::restore(&to, &backup).await.unwrap();
            let before = library(&to).await;
            let second = backup::restore(&to, &backup).await.unwrap();
            assert_eq!(second, Restored::AlreadyPresent(written), "{way}");
            assert_eq!(library(&to).await, before, "{way}");
        },
    )
    .await;
}

#[tokio::test]
async fn a_database_holding_anything_else_is_refused_naming_the_difference_and_left_as_it_was() {
    on_every_pair(
        |Case {
             way, to, backup, ..
         }| async move {
            store(&to, "Birchfield bay offcut", None).await;
            let before = library(&to).await;
            let err = format!("{:#}", backup::restore(&to, &backup).await.unwrap_err());
            assert!(
                err.contains("--database")
                    && err.contains("not empty (1 calibrations")
                    && err.contains("of the backup is not in the database"),
                "{way}: {err}"
            );
            assert_eq!(library(&to).await, before, "{way}");

            // The same library with one calibration archived since is refused too, naming it.
            let restored_db = Database::sqlite();
            let restored = restored_db.open().await;
            backup::restore(&restored, &backup).await.unwrap();
            let listed = calibrations::list(&restored, &ListFilter::default(), None, 1)
                .await
                .unwrap();
            calibrations::set_archived(&restored, listed[0].id, true, &by_hand())
                .await
                .unwrap();
            let err = format!(
                "{:#}",
                backup::restore(&restored, &backup).await.unwrap_err()
            );
            let named = format!(
                "calibration {} is archived in one and listed in the other",
                listed[0].id
            );
            assert!(err.contains(&named), "{way}: {err}");
            restored.close().await;
        },
    )
    .await;
}

/// A backup of a filled SQLite library in a new directory.
async fn sample_backup() -> tempfile::TempDir {
    let source = Database::sqlite();
    let storage = source.open().await;
    fill(&storage).await;
    let dir = tempfile::tempdir().unwrap();
    backup::write(&storage, dir.path()).await.unwrap();
    storage.close().await;
    dir
}

/// Rewrites the manifest's checksum and length of `path` to match the file as it is now.
fn reseal(dir: &Path, path: &str) {
    let mut m = manifest(dir);
    let bytes = std::fs::read(dir.join(path)).unwrap();
    let entry = m.files.iter_mut().find(|f| f.path == path).unwrap();
    entry.sha256 = calibrations::sha256_hex(&bytes);
    entry.bytes = bytes.len() as u64;
    std::fs::write(dir.join(MANIFEST), serde_json::to_vec_pretty(&m).unwrap()).unwrap();
}

/// Something done to a backup (its directory, its manifest as written).
type Damage = fn(&Path, &Manifest);

#[tokio::test]
async fn a_damaged_backup_is_refused_naming_the_file_and_nothing_is_written() {
    let damages: [(&str, Damage); 6] = [
        ("manifest.json is missing", |dir, _| {
            std::fs::remove_file(dir.join(MANIFEST)).unwrap()
        }),
        ("manifest.json: not a backup manifest", |dir, _| {
            std::fs::write(dir.join(MANIFEST), b"{\"format\": \"isotint-backup\",").unwrap()
        }),
        ("missing from the backup", |dir, m| {
            std::fs::remove_file(dir.join(&m.calibrations[0].file)).unwrap()
        }),
        ("audit.jsonl: checksum mismatch", |dir, _| {
            let path = dir.join("audit.jsonl");
            let mut bytes = std::fs::read(&path).unwrap();
            bytes[10] ^= 0x20;
            std::fs::write(path, bytes).unwrap();
        }),
        ("tokens.json: not valid", |dir, _| {
            std::fs::write(dir.join("tokens.json"), b"[{\"name\": \"x\"").unwrap();
            reseal(dir, "tokens.json");
        }),
        ("not a usable calibration file", |dir, m| {
            std::fs::write(dir.join(&m.calibrations[1].file), b"{}").unwrap();
            reseal(dir, &m.calibrations[1].file);
        }),
    ];
    for (expected, damage) in damages {
        let dir = sample_backup().await;
        let m = manifest(dir.path());
        damage(dir.path(), &m);
        let target = Database::sqlite();
        let to = target.open().await;
        let err = format!("{:#}", backup::restore(&to, dir.path()).await.unwrap_err());
        assert!(err.contains(expected), "expected {expected:?} in: {err}");
        if expected == "missing from the backup" {
            assert!(err.contains(&m.calibrations[0].file), "{err}");
        }
        let nothing = library(&to).await;
        assert!(
            nothing.calibrations.is_empty()
                && nothing.audit.is_empty()
                && nothing.tokens.is_empty(),
            "{expected}: something was written"
        );
        to.close().await;
    }
}

#[tokio::test]
async fn a_backup_whose_correction_names_a_calibration_it_lacks_is_refused() {
    let dir = sample_backup().await;
    let mut m = manifest(dir.path());
    let stray = CalibrationId::random();
    m.calibrations[0].supersedes = Some(stray);
    std::fs::write(
        dir.path().join(MANIFEST),
        serde_json::to_vec_pretty(&m).unwrap(),
    )
    .unwrap();
    let target = Database::sqlite();
    let to = target.open().await;
    let err = format!("{:#}", backup::restore(&to, dir.path()).await.unwrap_err());
    assert!(
        err.contains(&format!("corrects {stray}, which the backup does not hold")),
        "{err}"
    );
    to.close().await;
}

fn isotint(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_isotint"))
        .args(args)
        .output()
        .expect("the isotint binary runs")
}

fn text(output: &Output) -> (String, String) {
    (
        String::from_utf8_lossy(&output.stdout).into_owned(),
        String::from_utf8_lossy(&output.stderr).into_owned(),
    )
}

#[tokio::test]
async fn the_command_line_backs_up_restores_once_and_refuses_a_non_empty_directory() {
    let source = Database::sqlite();
    let storage = source.open().await;
    fill(&storage).await;
    storage.close().await;
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("backup");
    let out_arg = out.to_str().unwrap();

    let made = isotint(&["backup", "--database", &source.url(), "--out", out_arg]);
    let (stdout, stderr) = text(&made);
    assert!(made.status.success(), "{stderr}");
    assert!(stdout.contains("backup of 3 calibrations"), "{stdout}");

    // A mistyped database path is refused, naming the flag, and no empty database appears.
    let nowhere = dir.path().join("mistyped.sqlite");
    let typo = format!("sqlite://{}?mode=rwc", nowhere.display());
    let refused = isotint(&["backup", "--database", &typo, "--out", out_arg]);
    let (_, stderr) = text(&refused);
    assert!(!refused.status.success());
    assert!(
        stderr.contains("--database") && stderr.contains("no SQLite database"),
        "{stderr}"
    );
    assert!(!nowhere.exists());

    let twice = isotint(&["backup", "--database", &source.url(), "--out", out_arg]);
    let (_, stderr) = text(&twice);
    assert!(!twice.status.success());
    assert!(
        stderr.contains("--out") && stderr.contains("not empty"),
        "{stderr}"
    );

    let target = Database::sqlite();
    let first = isotint(&["restore", "--database", &target.url(), "--from", out_arg]);
    let (stdout, stderr) = text(&first);
    assert!(first.status.success(), "{stderr}");
    assert!(stdout.contains("restored 3 calibrations"), "{stdout}");
    let second = isotint(&["restore", "--database", &target.url(), "--from", out_arg]);
    let (stdout, stderr) = text(&second);
    assert!(second.status.success(), "{stderr}");
    assert!(
        stdout.contains("holds this backup already") && stdout.contains("nothing was changed"),
        "{stdout}"
    );

    let missing = isotint(&[
        "restore",
        "--database",
        &Database::sqlite().url(),
        "--from",
        dir.path().to_str().unwrap(),
    ]);
    let (_, stderr) = text(&missing);
    assert!(!missing.status.success());
    assert!(
        stderr.contains("--from") && stderr.contains("manifest.json is missing"),
        "{stderr}"
    );
}
