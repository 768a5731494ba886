//! The storage layer on SQLite and, when `ISOTINT_TEST_POSTGRES_URL` is set, on PostgreSQL:
//! the same portable SQL, the same behaviour.

mod common;

use std::future::Future;
use std::time::Duration;

use isotint::access::{Actor, Origin};
use isotint::calibration_sets::{import_built_in, import_dir, BUILT_IN};
use isotint::domain::{CalibrationId, FileStem, OrderMapId};
use isotint::storage::audit::AuditAction;
use isotint::storage::calibrations::{self, ListFilter};
use isotint::storage::{order_maps, Storage, StorageError};
use isotint_core::compact;
use isotint_core::export::read_npy_f32;
use isotint_core::exposure::ExposureCorrection;
use isotint_core::order_map::MapStatistics;
use isotint_core::specimen::{MaskSource, MaskUsed};
use isotint_core::{OrderMap, PixelFlags};
use sqlx::Row;
use time::OffsetDateTime;

/// Runs `check` on a fresh SQLite database, then on a fresh PostgreSQL database if one is
/// configured.
async fn on_every_backend<F, Fut>(check: F)
where
    F: Fn(Storage) -> Fut,
    Fut: Future<Output = ()>,
{
    let check = &check;
    common::on_every_empty_database(|url, backend| async move {
        let storage = Storage::connect(&url).await.unwrap();
        assert_eq!(storage.backend(), backend);
        check(storage.clone()).await;
        storage.close().await;
    })
    .await;
}

/// A change made on this machine without HTTP, as an import.
fn by_hand() -> (&'static Origin, AuditAction) {
    static ORIGIN: Origin = Origin {
        actor: Actor::CommandLine,
        address: None,
    };
    (&ORIGIN, AuditAction::Import)
}

/// Stores a rendered table named `name`.
async fn store(
    storage: &Storage,
    name: &str,
    supersedes: Option<CalibrationId>,
) -> Result<calibrations::Inserted, StorageError> {
    let table = common::table(name);
    calibrations::insert(
        storage,
        &table,
        &table.to_json(),
        supersedes,
        None,
        by_hand(),
    )
    .await
}

#[tokio::test]
async fn a_table_without_a_residual_then_one_with_a_residual_are_stored_on_every_backend() {
    // On PostgreSQL both inserts go through the one connection the idle pool hands out, whose
    // prepared insert must take a residual after a missing one.
    on_every_backend(|storage| async move {
        let rendered = store(&storage, "Rendered strip, no residual", None)
            .await
            .unwrap();
        assert_eq!(rendered.row.residual_de2000, None);
        let summary = import_built_in(&storage).await.unwrap();
        assert_eq!(summary.imported, 1);
        let beam = calibrations::list(&storage, &ListFilter::default(), None, 500)
            .await
            .unwrap()
            .into_iter()
            .find(|c| c.source_kind == "beam_photo")
            .unwrap();
        let residual = beam.residual_de2000.unwrap();
        // source: the built-in set's own file, "residual_de2000" of its beam-photo source
        let (_, bytes) = BUILT_IN[0];
        let file: serde_json::Value = serde_json::from_slice(bytes).unwrap();
        assert_eq!(Some(residual), file["source"]["residual_de2000"].as_f64());
    })
    .await;
}

#[tokio::test]
async fn calibrations_are_stored_listed_superseded_and_archived_on_every_backend() {
    on_every_backend(|storage| async move {
        let first = common::table("Epoxy strip A");
        let a = calibrations::insert(&storage, &first, &first.to_json(), None, None, by_hand())
            .await
            .unwrap();
        assert!(a.created);
        assert_eq!(a.row.metadata.name, "Epoxy strip A");
        assert_eq!(a.row.source_kind, "rendered");
        assert!((a.row.max_order - 4.0).abs() < 1e-9);

        let again = calibrations::insert(&storage, &first, &first.to_json(), None, None, by_hand())
            .await
            .unwrap();
        assert!(!again.created, "the same table is stored once");
        assert_eq!(again.row.id, a.row.id);

        let b = store(&storage, "Epoxy strip B", Some(a.row.id))
            .await
            .unwrap();
        assert_eq!(b.row.supersedes, Some(a.row.id));
        let a_now = calibrations::get(&storage, a.row.id).await.unwrap();
        assert_eq!(a_now.superseded_by, Some(b.row.id));

        let twice = store(&storage, "Epoxy strip C", Some(a.row.id)).await;
        assert!(
            matches!(twice, Err(StorageError::Superseded { latest, .. }) if latest == b.row.id),
            "{twice:?}"
        );
        let unknown = store(&storage, "Epoxy strip D", Some(CalibrationId::random())).await;
        assert!(
            matches!(unknown, Err(StorageError::NotFound { .. })),
            "{unknown:?}"
        );

        let all = calibrations::list(&storage, &ListFilter::default(), None, 500)
            .await
            .unwrap();
        assert_eq!(all.len(), 2, "failed inserts left no row");

        let found = calibrations::list(
            &storage,
            &ListFilter {
                text: Some("STRIP b".into()),
                include_archived: false,
            },
            None,
            500,
        )
        .await
        .unwrap();
        assert_eq!(
            found.iter().map(|r| r.id).collect::<Vec<_>>(),
            vec![b.row.id]
        );
        let wildcard = calibrations::list(
            &storage,
            &ListFilter {
                text: Some("%".into()),
                include_archived: false,
            },
            None,
            500,
        )
        .await
        .unwrap();
        assert!(wildcard.is_empty(), "% matches literally");

        let archived = calibrations::set_archived(&storage, a.row.id, true, by_hand().0)
            .await
            .unwrap();
        assert!(archived.archived);
        let visible = calibrations::list(&storage, &ListFilter::default(), None, 500)
            .await
            .unwrap();
        assert_eq!(visible.len(), 1);
        let with_archived = calibrations::list(
            &storage,
            &ListFilter {
                text: None,
                include_archived: true,
            },
            None,
            500,
        )
        .await
        .unwrap();
        assert_eq!(with_archived.len(), 2);
        calibrations::set_archived(&storage, a.row.id, false, by_hand().0)
            .await
            .unwrap();

        let json = calibrations::table_json(&storage, a.row.id).await.unwrap();
        assert_eq!(json, first.to_json(), "the file is kept byte for byte");
        let parsed = calibrations::table(&storage, a.row.id).await.unwrap();
        assert_eq!(parsed.metadata, first.metadata);
        assert_eq!(parsed.entries.len(), first.entries.len());
    })
    .await;
}

#[tokio::test]
async fn importing_the_calibration_sets_twice_stores_each_file_once_on_every_backend() {
    on_every_backend(|storage| async move {
        let dir = tempfile::tempdir().unwrap();
        std::fs::write(dir.path().join("a.json"), common::table("Set A").to_json()).unwrap();
        std::fs::write(dir.path().join("b.json"), common::table("Set B").to_json()).unwrap();
        std::fs::write(dir.path().join("broken.json"), b"{\"format\": 1").unwrap();
        std::fs::write(dir.path().join("notes.txt"), b"not a calibration").unwrap();

        let first = import_dir(&storage, dir.path()).await.unwrap();
        assert_eq!(first.imported, 2);
        assert_eq!(first.refused.len(), 1);
        let second = import_dir(&storage, dir.path()).await.unwrap();
        assert_eq!(second.imported, 0);
        assert_eq!(second.already_known, 2);
        let listed = calibrations::list(&storage, &ListFilter::default(), None, 500)
            .await
            .unwrap();
        assert_eq!(listed.len(), 2);

        let missing = import_dir(&storage, &dir.path().join("nowhere"))
            .await
            .unwrap();
        assert_eq!(missing.imported, 0);
    })
    .await;
}

#[tokio::test]
async fn the_built_in_demo_set_is_stored_once_and_a_folder_adds_only_what_is_new_on_every_backend()
{
    on_every_backend(|storage| async move {
        let first = import_built_in(&storage).await.unwrap();
        assert_eq!((first.imported, first.already_known), (1, 0));
        let again = import_built_in(&storage).await.unwrap();
        assert_eq!((again.imported, again.already_known), (0, 1));

        let dir = tempfile::tempdir().unwrap();
        let (name, bytes) = BUILT_IN[0];
        std::fs::write(dir.path().join(name), bytes).unwrap();
        std::fs::write(
            dir.path().join("lab.json"),
            common::table("Lab set").to_json(),
        )
        .unwrap();
        let folder = import_dir(&storage, dir.path()).await.unwrap();
        assert_eq!((folder.imported, folder.already_known), (1, 1));

        let listed = calibrations::list(&storage, &ListFilter::default(), None, 500)
            .await
            .unwrap();
        let mut names: Vec<&str> = listed.iter().map(|r| r.metadata.name.as_str()).collect();
        names.sort_unstable();
        assert_eq!(names, ["Demo beam, four-point bending", "Lab set"]);
    })
    .await;
}

/// The mask of [`small_map`]: found from the photo, 5 of its 6 pixels.
fn found_mask() -> MaskUsed {
    MaskUsed {
        source: MaskSource::Found,
        specimen_share: 5.0 / 6.0,
    }
}

fn small_map() -> OrderMap {
    OrderMap {
        width: 3,
        height: 2,
        order: vec![0.5, 1.25, f32::NAN, 2.00004, 3.5, f32::NAN],
        residual: vec![1.0; 6],
        margin: vec![4.0; 6],
        flags: vec![
            PixelFlags(0),
            PixelFlags(0),
            PixelFlags(PixelFlags::OUTSIDE_MASK),
            PixelFlags(0),
            PixelFlags(0),
            PixelFlags(PixelFlags::UNRELIABLE),
        ],
        uncertainty: vec![0.02, 0.05, f32::NAN, 0.125, 0.5, f32::NAN],
        exposure: ExposureCorrection::NONE,
        statistics: MapStatistics {
            specimen_pixels: 5,
            valued_pixels: 4,
            beyond_range_share: 0.0,
            unreliable_share: 0.2,
            min_order: 0.5,
            max_order: 3.5,
            mean_order: 1.8125,
            mean_residual: f64::NAN,
            table_max_order: 4.4,
            ambiguous_colour: false,
        },
    }
}

#[tokio::test]
async fn an_order_map_round_trips_through_the_database_and_is_purged_after_expiry_on_every_backend()
{
    on_every_backend(|storage| async move {
        let cal = store(&storage, "Map strip", None).await.unwrap();
        let map = small_map();
        let bands = compact::encode_map(&map).unwrap();
        let hour = Duration::from_secs(3600);
        let stem = FileStem::of_photo("disc-03.png");
        let row = order_maps::insert(
            &storage,
            cal.row.id,
            (&map, found_mask()),
            stem.as_ref(),
            &bands,
            hour,
        )
        .await
        .unwrap();
        let (meta, back) = order_maps::load(&storage, row.id).await.unwrap();
        assert_eq!(meta.calibration_id, cal.row.id);
        assert_eq!(meta.mask, Some(found_mask()), "the mask used reads back");
        assert_eq!(
            meta.file_stem, stem,
            "the stem its files are named by reads back"
        );
        assert_eq!((back.width, back.height), (3, 2));
        assert_eq!(back.order[1], 1.25);
        assert!(back.order[2].is_nan());
        // Kept to 1e-4 fringe: 2.00004 is 20 000.4 steps, stored as 20 000.
        assert_eq!(back.order[3], 2.0);
        assert_eq!(back.flags[2], PixelFlags(PixelFlags::OUTSIDE_MASK));
        assert_eq!(back.flags[5], PixelFlags(PixelFlags::UNRELIABLE));
        assert_eq!(back.uncertainty[3], 0.125);
        assert!(back.uncertainty[5].is_nan());
        assert_eq!(back.statistics.max_order, 3.5);
        assert!(back.statistics.mean_residual.is_nan());
        assert!(meta.statistics["mean_residual"].is_null());

        let later = OffsetDateTime::now_utc() + time::Duration::hours(2);
        assert_eq!(
            order_maps::purge_expired(&storage, OffsetDateTime::now_utc())
                .await
                .unwrap(),
            0
        );
        assert_eq!(order_maps::purge_expired(&storage, later).await.unwrap(), 1);
        assert!(matches!(
            order_maps::get(&storage, row.id).await,
            Err(StorageError::NotFound { .. })
        ));
    })
    .await;
}

#[tokio::test]
async fn a_map_stored_before_the_uncertainty_column_is_converted_to_bands_and_reads_back_as_nan_on_every_backend(
) {
    common::on_every_empty_database(|url, _| async move {
        // The schema as it was before `0002_order_map_uncertainty.sql`: the first migration only.
        let first = tempfile::tempdir().unwrap();
        std::fs::copy(
            concat!(env!("CARGO_MANIFEST_DIR"), "/migrations/0001_initial.sql"),
            first.path().join("0001_initial.sql"),
        )
        .unwrap();
        sqlx::any::install_default_drivers();
        let pool = sqlx::AnyPool::connect(&url).await.unwrap();
        sqlx::migrate::Migrator::new(first.path())
            .await
            .unwrap()
            .run(&pool)
            .await
            .unwrap();
        let (calibration, map) = (CalibrationId::random(), OrderMapId::random());
        let statistics = serde_json::to_string(&small_map().statistics).unwrap();
        let exposure = serde_json::to_string(&ExposureCorrection::NONE).unwrap();
        sqlx::query(
            "INSERT INTO calibrations (id, name, material, light_source, camera, metadata_json, \
             table_json, source_kind, order_step, max_order, created_at_ms, stored_at_ms, \
             content_sha256) VALUES ($1, 'Old strip', '', '', '', '{}', '{}', 'rendered', 0.01, \
             4.0, 0, 0, 'old')",
        )
        .bind(calibration.to_string())
        .execute(&pool)
        .await
        .unwrap();
        let orders: Vec<u8> = small_map()
            .order
            .iter()
            .flat_map(|v| v.to_le_bytes())
            .collect();
        sqlx::query(
            "INSERT INTO order_maps (id, calibration_id, created_at_ms, expires_at_ms, width, \
             height, statistics_json, exposure_json, orders, residuals, margins, flags) \
             VALUES ($1, $2, 0, $3, 3, 2, $4, $5, $6, $6, $6, $7)",
        )
        .bind(map.to_string())
        .bind(calibration.to_string())
        .bind(isotint::domain::unix_ms(
            OffsetDateTime::now_utc() + time::Duration::hours(1),
        ))
        .bind(statistics)
        .bind(exposure)
        .bind(orders)
        .bind(vec![0u8; 6])
        .execute(&pool)
        .await
        .unwrap();
        pool.close().await;

        // Connecting applies the later migrations to the stored map and converts it to bands,
        // emptying its old arrays.
        let storage = Storage::connect(&url).await.unwrap();
        let converted =
            sqlx::query("SELECT band_rows, CAST(LENGTH(orders) AS BIGINT) AS old FROM order_maps")
                .fetch_one(storage.pool())
                .await
                .unwrap();
        assert_eq!(converted.get::<i64, _>("band_rows"), 32);
        assert_eq!(converted.get::<i64, _>("old"), 0);
        let (_, back) = order_maps::load(&storage, map).await.unwrap();
        assert_eq!(back.order[1], 1.25);
        assert_eq!(back.uncertainty.len(), 6);
        assert!(
            back.uncertainty.iter().all(|u| u.is_nan()),
            "{:?}",
            back.uncertainty
        );

        // Through the API its uncertainty file is all NaN too.
        let app = isotint::http::app(isotint::http::AppState::new(
            storage.clone(),
            isotint::config::ServiceConfig::default(),
        ));
        let reply = common::get(&app, &format!("/api/v1/order-maps/{map}/uncertainty")).await;
        assert_eq!(reply.status, axum::http::StatusCode::OK);
        let (rows, cols, values) = read_npy_f32(&reply.body).unwrap();
        assert_eq!((rows, cols), (2, 3));
        assert!(values.iter().all(|u| u.is_nan()), "{values:?}");
        storage.close().await;
    })
    .await;
}

/// Writers racing in the contention test: enough to collide, few enough for a test.
const WRITERS: usize = 40;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn concurrent_imports_corrections_and_stored_maps_succeed_or_conflict_on_every_backend() {
    on_every_backend(|storage| async move {
        let shared = store(&storage, "Contended original", None)
            .await
            .unwrap()
            .row
            .id;
        let mut originals = Vec::new();
        for i in 0..WRITERS {
            originals.push(
                store(&storage, &format!("Original {i}"), None)
                    .await
                    .unwrap()
                    .row
                    .id,
            );
        }
        let mut writers = tokio::task::JoinSet::new();
        for (i, own) in originals.into_iter().enumerate() {
            let storage = storage.clone();
            let tables = [
                common::table(&format!("Concurrent import {i}")),
                common::table(&format!("Correction {i}")),
                common::table(&format!("Rival correction {i}")),
            ];
            writers.spawn(async move {
                let write = |table: &isotint_core::CalibrationTable, supersedes| {
                    let storage = storage.clone();
                    let json = table.to_json();
                    let table = table.clone();
                    async move {
                        calibrations::insert(&storage, &table, &json, supersedes, None, by_hand())
                            .await
                    }
                };
                let imported = write(&tables[0], None).await.map(|i| i.created);
                let corrected = write(&tables[1], Some(own)).await.map(|i| i.created);
                let rival = write(&tables[2], Some(shared)).await.map(|_| ());
                let map = small_map();
                let bands = compact::encode_map(&map).unwrap();
                let minute = Duration::from_secs(60);
                let stored =
                    order_maps::insert(&storage, own, (&map, found_mask()), None, &bands, minute)
                        .await
                        .map(|_| ());
                (imported, corrected, rival, stored)
            });
        }
        let mut rivals_won = 0;
        while let Some(joined) = writers.join_next().await {
            let (imported, corrected, rival, stored) = joined.unwrap();
            assert!(imported.unwrap(), "every import is a new row");
            assert!(
                corrected.unwrap(),
                "every correction of its own original is a new row"
            );
            stored.unwrap();
            match rival {
                Ok(()) => rivals_won += 1,
                Err(StorageError::Conflict(_) | StorageError::Superseded { .. }) => {}
                Err(other) => panic!("a rival correction failed with {other}"),
            }
        }
        assert_eq!(
            rivals_won, 1,
            "exactly one correction of the shared original wins"
        );
        let all = calibrations::list(
            &storage,
            &ListFilter {
                include_archived: true,
                ..ListFilter::default()
            },
            None,
            500,
        )
        .await
        .unwrap();
        assert_eq!(all.len(), 1 + WRITERS * 3 + 1);
    })
    .await;
}

#[tokio::test]
async fn a_write_refused_by_another_connections_lock_is_busy_not_a_database_fault() {
    use sqlx::sqlite::SqliteConnectOptions;
    use sqlx::{ConnectOptions, Executor};
    let dir = tempfile::tempdir().unwrap();
    let file = dir.path().join("locked.sqlite");
    let options = SqliteConnectOptions::new()
        .filename(&file)
        .create_if_missing(true)
        .busy_timeout(Duration::ZERO);
    let mut holder = options.connect().await.unwrap();
    holder.execute("CREATE TABLE t (x INTEGER)").await.unwrap();
    holder.execute("BEGIN IMMEDIATE").await.unwrap();
    let mut other = options.connect().await.unwrap();
    let refused = other.execute("INSERT INTO t VALUES (1)").await.unwrap_err();
    assert!(
        matches!(StorageError::from(refused), StorageError::Busy(_)),
        "a locked database reads as busy"
    );
    assert!(matches!(
        StorageError::from(sqlx::Error::PoolTimedOut),
        StorageError::Busy(_)
    ));
    let missing = other
        .execute("SELECT * FROM no_such_table")
        .await
        .unwrap_err();
    assert!(matches!(
        StorageError::from(missing),
        StorageError::Database(_)
    ));
}

#[tokio::test]
async fn calibrations_stored_before_the_stress_input_columns_get_them_from_their_tables_on_every_backend(
) {
    common::on_every_empty_database(|url, _| async move {
        let storage = Storage::connect(&url).await.unwrap();
        let mut table = common::table("Strip with a thickness");
        table.metadata.thickness_mm = Some(6.0);
        let stored =
            calibrations::insert(&storage, &table, &table.to_json(), None, None, by_hand())
                .await
                .unwrap();
        assert_eq!(stored.row.stress_defaults.thickness_mm, Some(6.0));
        // As a row stored before migration 0007 looks: columns empty, not yet filled.
        sqlx::query("UPDATE calibrations SET thickness_mm = NULL, stress_defaults_filled = 0")
            .execute(storage.writer())
            .await
            .unwrap();
        storage.close().await;
        let storage = Storage::connect(&url).await.unwrap();
        let row = calibrations::get(&storage, stored.row.id).await.unwrap();
        assert_eq!(row.stress_defaults.thickness_mm, Some(6.0));
        // A rendered table knows no fringe value.
        assert_eq!(row.stress_defaults.fringe_value_n_per_mm, None);
        storage.close().await;
    })
    .await;
}
