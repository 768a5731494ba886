//! The calibration resources through the real router: health, import, list and search,
//! export, corrections, archive and restore, and the OpenAPI document.

mod common;

use axum::http::StatusCode;
use common::{get, import, import_id, post, service, table};
use isotint_core::render::{CameraModel, LightSource};

#[tokio::test]
async fn health_reports_the_version_and_the_sqlite_database_as_reachable() {
    let svc = service().await;
    let reply = get(&svc.app, "/api/v1/health").await;
    assert_eq!(reply.status, StatusCode::OK);
    let v = reply.json();
    assert_eq!(v["status"], "ok");
    assert_eq!(v["database"]["kind"], "sqlite");
    assert_eq!(v["database"]["reachable"], true);
    assert_eq!(v["version"], env!("CARGO_PKG_VERSION"));
}

#[tokio::test]
async fn health_answers_503_with_the_database_unreachable_once_its_connections_are_closed() {
    let svc = service().await;
    svc.storage.close().await;
    let reply = get(&svc.app, "/api/v1/health").await;
    assert_eq!(reply.status, StatusCode::SERVICE_UNAVAILABLE);
    assert!(reply.headers.contains_key(axum::http::header::RETRY_AFTER));
    let v = reply.json();
    assert_eq!(v["status"], "unavailable");
    assert_eq!(v["database"]["kind"], "sqlite");
    assert_eq!(v["database"]["reachable"], false);
    assert_eq!(v["version"], env!("CARGO_PKG_VERSION"));
}

#[tokio::test]
async fn an_imported_calibration_is_listed_read_and_exported_byte_for_byte() {
    let svc = service().await;
    let t = table("Epoxy strip, halogen");
    let file = t.to_json();
    let reply = import(&svc.app, &t).await;
    assert_eq!(reply.status, StatusCode::CREATED);
    let summary = reply.json();
    let id = summary["id"].as_str().unwrap().to_string();
    assert_eq!(summary["name"], "Epoxy strip, halogen");
    assert_eq!(summary["source_kind"], "rendered");
    assert_eq!(summary["order_step"], 0.01);
    assert_eq!(summary["max_order"], 4.0);
    assert_eq!(summary["archived"], false);
    assert!(summary["supersedes"].is_null() && summary["superseded_by"].is_null());

    let again = import(&svc.app, &t).await;
    assert_eq!(again.status, StatusCode::OK, "the same file is stored once");
    assert_eq!(again.json()["id"], id.as_str());

    let list = get(&svc.app, "/api/v1/calibrations").await.json();
    assert_eq!(list["calibrations"].as_array().unwrap().len(), 1);

    let detail = get(&svc.app, &format!("/api/v1/calibrations/{id}")).await;
    assert_eq!(detail.status, StatusCode::OK);
    let detail = detail.json();
    assert_eq!(detail["name"], "Epoxy strip, halogen");
    assert_eq!(detail["table"]["format"], "isotint-calibration");

    let export = get(&svc.app, &format!("/api/v1/calibrations/{id}/export")).await;
    assert_eq!(export.status, StatusCode::OK);
    assert_eq!(String::from_utf8(export.body).unwrap(), file);
    let disposition = export.headers["content-disposition"].to_str().unwrap();
    assert!(disposition.starts_with("attachment;"), "{disposition}");
}

#[tokio::test]
async fn a_table_written_with_the_renderers_older_short_names_lists_its_light_and_camera_in_words()
{
    let svc = service().await;
    let mut old = table("Strip written before plain names");
    old.metadata.light_source = "halogen".into();
    old.metadata.camera = "gaussian-sensor".into();
    let id = import_id(&svc.app, &old).await;
    let detail = get(&svc.app, &format!("/api/v1/calibrations/{id}"))
        .await
        .json();
    assert_eq!(detail["light_source"], LightSource::Halogen.description());
    assert_eq!(detail["camera"], CameraModel::Sensor.description());
    // The lab's own words are shown unchanged.
    let mut own = table("Strip with the lab's own words");
    own.metadata.camera = "bench camera, 50 mm lens".into();
    let id = import_id(&svc.app, &own).await;
    let detail = get(&svc.app, &format!("/api/v1/calibrations/{id}"))
        .await
        .json();
    assert_eq!(detail["camera"], "bench camera, 50 mm lens");
}

#[tokio::test]
async fn search_matches_name_material_light_and_camera_without_regard_to_case() {
    let svc = service().await;
    let mut a = table("Bracket batch 7");
    a.metadata.material = "Polycarbonate".into();
    let mut b = table("Disc series");
    b.metadata.light_source = "LED panel 5000 K".into();
    import_id(&svc.app, &a).await;
    import_id(&svc.app, &b).await;
    let names = |v: serde_json::Value| -> Vec<String> {
        v["calibrations"]
            .as_array()
            .unwrap()
            .iter()
            .map(|c| c["name"].as_str().unwrap().to_string())
            .collect()
    };
    let found = get(&svc.app, "/api/v1/calibrations?q=POLYCARB")
        .await
        .json();
    assert_eq!(names(found), ["Bracket batch 7"]);
    let found = get(&svc.app, "/api/v1/calibrations?q=led%20panel")
        .await
        .json();
    assert_eq!(names(found), ["Disc series"]);
    let found = get(&svc.app, "/api/v1/calibrations?q=bench%20CAMERA")
        .await
        .json();
    assert_eq!(names(found).len(), 2);
    let none = get(&svc.app, "/api/v1/calibrations?q=%25").await.json();
    assert!(
        names(none).is_empty(),
        "a % in the search text matches literally"
    );
}

#[tokio::test]
async fn a_correction_names_the_calibration_it_supersedes_and_archiving_hides_without_deleting() {
    let svc = service().await;
    let old = import_id(&svc.app, &table("Strip, first cut")).await;
    let reply = post(
        &svc.app,
        &format!("/api/v1/calibrations/import?supersedes={old}"),
        "application/json",
        table("Strip, corrected").to_json().into_bytes(),
    )
    .await;
    assert_eq!(reply.status, StatusCode::CREATED);
    let new = reply.json()["id"].as_str().unwrap().to_string();
    assert_eq!(reply.json()["supersedes"], old.as_str());
    let old_now = get(&svc.app, &format!("/api/v1/calibrations/{old}"))
        .await
        .json();
    assert_eq!(old_now["superseded_by"], new.as_str());

    let twice = post(
        &svc.app,
        &format!("/api/v1/calibrations/import?supersedes={old}"),
        "application/json",
        table("Strip, corrected again").to_json().into_bytes(),
    )
    .await;
    assert_eq!(twice.status, StatusCode::CONFLICT);
    assert!(
        twice.error_message().contains("already superseded"),
        "{}",
        twice.error_message()
    );

    let archived = post(
        &svc.app,
        &format!("/api/v1/calibrations/{old}/archive"),
        "application/json",
        vec![],
    )
    .await;
    assert_eq!(archived.status, StatusCode::OK);
    assert_eq!(archived.json()["archived"], true);
    let listed = get(&svc.app, "/api/v1/calibrations").await.json();
    assert_eq!(listed["calibrations"].as_array().unwrap().len(), 1);
    let all = get(&svc.app, "/api/v1/calibrations?include_archived=true")
        .await
        .json();
    assert_eq!(all["calibrations"].as_array().unwrap().len(), 2);
    assert_eq!(
        get(&svc.app, &format!("/api/v1/calibrations/{old}"))
            .await
            .status,
        StatusCode::OK
    );

    let restored = post(
        &svc.app,
        &format!("/api/v1/calibrations/{old}/restore"),
        "application/json",
        vec![],
    )
    .await;
    assert_eq!(restored.json()["archived"], false);
    let listed = get(&svc.app, "/api/v1/calibrations").await.json();
    assert_eq!(listed["calibrations"].as_array().unwrap().len(), 2);
}

#[tokio::test]
async fn hostile_text_is_stored_verbatim_or_refused_and_never_executed() {
    let svc = service().await;
    let mut sql = table("x'); DROP TABLE calibrations; --");
    sql.metadata.material = "<script>alert(1)</script>".into();
    let reply = import(&svc.app, &sql).await;
    assert_eq!(reply.status, StatusCode::CREATED);
    assert_eq!(reply.json()["material"], "<script>alert(1)</script>");
    let listed = get(&svc.app, "/api/v1/calibrations?q=drop%20table")
        .await
        .json();
    assert_eq!(
        listed["calibrations"].as_array().unwrap().len(),
        1,
        "the table still exists"
    );

    let mut long = table("long");
    long.metadata.camera = "c".repeat(5000);
    let reply = import(&svc.app, &long).await;
    assert_eq!(reply.status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(
        reply.error_message().contains("camera"),
        "{}",
        reply.error_message()
    );

    let mut control = table("bell");
    control.metadata.light_source = "lamp\u{7}".into();
    let reply = import(&svc.app, &control).await;
    assert_eq!(reply.status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(
        reply.error_message().contains("light_source"),
        "{}",
        reply.error_message()
    );

    let query = get(
        &svc.app,
        &format!("/api/v1/calibrations?q={}", "q".repeat(500)),
    )
    .await;
    assert_eq!(query.status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(query.error_message().contains('q'));
    let control = get(&svc.app, "/api/v1/calibrations?q=bay%01").await;
    assert_eq!(control.status, StatusCode::UNPROCESSABLE_ENTITY);
    assert!(control.error_message().contains("control character"));
    let listed = get(&svc.app, "/api/v1/calibrations").await.json();
    assert_eq!(
        listed["calibrations"].as_array().unwrap().len(),
        1,
        "refused imports left no row"
    );
}

#[tokio::test]
async fn the_openapi_document_describes_every_route() {
    let svc = service().await;
    let reply = get(&svc.app, "/api/v1/openapi.json").await;
    assert_eq!(reply.status, StatusCode::OK);
    let doc = reply.json();
    assert!(doc["openapi"].as_str().unwrap().starts_with("3.1"));
    let paths = doc["paths"].as_object().unwrap();
    for path in [
        "/api/v1/health",
        "/api/v1/calibrations",
        "/api/v1/calibrations/{id}",
        "/api/v1/calibrations/{id}/export",
        "/api/v1/calibrations/import",
        "/api/v1/calibrations/{id}/archive",
        "/api/v1/calibrations/{id}/restore",
        "/api/v1/order-maps",
        "/api/v1/order-maps/{id}",
        "/api/v1/order-maps/{id}/{file}",
    ] {
        assert!(
            paths.contains_key(path),
            "{path} is missing from the OpenAPI document"
        );
    }
}

#[tokio::test]
async fn the_service_runs_on_postgresql_when_one_is_configured() {
    let Some(db) = common::PostgresDatabase::create().await else {
        eprintln!("ISOTINT_TEST_POSTGRES_URL not set: PostgreSQL variant skipped");
        return;
    };
    let storage = isotint::storage::Storage::connect(&db.url).await.unwrap();
    let app = isotint::http::app(isotint::http::AppState::new(
        storage.clone(),
        isotint::config::ServiceConfig::default(),
    ));
    assert_eq!(
        get(&app, "/api/v1/health").await.json()["database"]["kind"],
        "postgres"
    );
    let t = table("Strip on PostgreSQL");
    let id = import_id(&app, &t).await;
    let export = get(&app, &format!("/api/v1/calibrations/{id}/export")).await;
    assert_eq!(String::from_utf8(export.body).unwrap(), t.to_json());
    let found = get(&app, "/api/v1/calibrations?q=postgresql").await.json();
    assert_eq!(found["calibrations"].as_array().unwrap().len(), 1);
    storage.close().await;
    db.drop_database().await;
}

/// Forty clients at once: each imports a table and tries to correct the shared original, ten
/// of them also store a map; every answer is 201, or 409 for a correction that came second.
async fn contend(svc: &common::TestService) {
    let shared = import_id(&svc.app, &table("Shared original")).await;
    let photo = common::grey_png(96, 64);
    let mut requests = tokio::task::JoinSet::new();
    for i in 0..40 {
        let app = svc.app.clone();
        let (import_table, rival) = (table(&format!("Import {i}")), table(&format!("Rival {i}")));
        let (shared, photo) = (shared.clone(), photo.clone());
        requests.spawn(async move {
            let mut statuses = vec![
                ("import", import(&app, &import_table).await.status),
                (
                    "correction",
                    post(
                        &app,
                        &format!("/api/v1/calibrations/import?supersedes={shared}"),
                        "application/json",
                        rival.to_json().into_bytes(),
                    )
                    .await
                    .status,
                ),
            ];
            if i < 10 {
                let map = common::Form::new()
                    .file("photo", "p.png", "image/png", photo)
                    .text("calibration", &shared)
                    .post(&app, "/api/v1/order-maps")
                    .await;
                statuses.push(("stored map", map.status));
            }
            statuses
        });
    }
    let mut corrections = 0;
    while let Some(statuses) = requests.join_next().await {
        for (what, status) in statuses.unwrap() {
            match (what, status) {
                ("correction", StatusCode::CREATED) => corrections += 1,
                (_, StatusCode::CREATED) | ("correction", StatusCode::CONFLICT) => {}
                _ => panic!("{what} answered {status}"),
            }
        }
    }
    assert_eq!(
        corrections, 1,
        "exactly one correction of the shared original wins"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn concurrent_imports_corrections_and_stored_maps_answer_201_or_409_on_every_backend() {
    let config = isotint::config::ServiceConfig::default();
    contend(&common::service_with(config.clone()).await).await;
    match common::PostgresDatabase::create().await {
        Some(db) => {
            let svc = common::service_on(&db.url, config, tempfile::tempdir().unwrap()).await;
            contend(&svc).await;
            svc.storage.close().await;
            db.drop_database().await;
        }
        None => eprintln!("ISOTINT_TEST_POSTGRES_URL not set: PostgreSQL variant skipped"),
    }
}

/// A service with the default configuration on the empty database at `url`.
async fn open_service(url: &str) -> common::TestService {
    common::service_on(url, Default::default(), tempfile::tempdir().unwrap()).await
}

/// `base` renamed `name` and dated `minute` minutes into a fixed day, so that several share a
/// time and the list's tie-break by id is exercised.
fn dated(
    base: &isotint_core::CalibrationTable,
    name: &str,
    minute: i64,
) -> isotint_core::CalibrationTable {
    let mut t = base.clone();
    t.metadata.name = name.into();
    t.created_at = time::macros::datetime!(2020-03-02 08:00 UTC) + time::Duration::minutes(minute);
    t
}

/// Follows `next` from `first` to the last page; returns every page's reply body.
async fn pages(app: &axum::Router, first: &str) -> Vec<serde_json::Value> {
    let mut pages = Vec::new();
    let mut uri = Some(first.to_string());
    while let Some(u) = uri {
        let reply = get(app, &u).await;
        assert_eq!(reply.status, StatusCode::OK, "{}", reply.error_message());
        let page = reply.json();
        uri = page["next"].as_str().map(str::to_string);
        pages.push(page);
    }
    pages
}

/// The ids of a page, in order.
fn ids(page: &serde_json::Value) -> Vec<String> {
    page["calibrations"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c["id"].as_str().unwrap().to_string())
        .collect()
}

async fn read_120_in_pages_of_50(url: String) {
    let svc = open_service(&url).await;
    let base = table("Base");
    let mut stored = std::collections::BTreeSet::new();
    for i in 0..120 {
        stored.insert(import_id(&svc.app, &dated(&base, &format!("Strip {i}"), i % 7)).await);
    }
    let pages = pages(&svc.app, "/api/v1/calibrations?limit=50").await;
    let sizes: Vec<usize> = pages.iter().map(|p| ids(p).len()).collect();
    assert_eq!(sizes, [50, 50, 20]);
    assert!(pages.iter().all(|p| p["total"] == 120));
    assert!(
        pages[2].get("next").is_none(),
        "the last page has no next link"
    );
    let read: Vec<String> = pages.iter().flat_map(ids).collect();
    let unique: std::collections::BTreeSet<String> = read.iter().cloned().collect();
    assert_eq!(read.len(), unique.len(), "no id is read twice");
    assert_eq!(unique, stored, "every stored id is read");
    let default = get(&svc.app, "/api/v1/calibrations").await.json();
    assert_eq!(
        ids(&default).len(),
        50,
        "a page holds 50 unless limit says otherwise"
    );
    svc.storage.close().await;
}

#[tokio::test]
async fn a_hundred_and_twenty_calibrations_read_in_pages_of_fifty_come_in_three_pages_each_once() {
    common::on_every_empty_database(|url, _| read_120_in_pages_of_50(url)).await;
}

async fn insert_between_pages(url: String) {
    let svc = open_service(&url).await;
    let base = table("Base");
    let mut old = std::collections::BTreeSet::new();
    for i in 0..12 {
        old.insert(import_id(&svc.app, &dated(&base, &format!("Old {i}"), 10 * i)).await);
    }
    let first = get(&svc.app, "/api/v1/calibrations?limit=5").await.json();
    // One newer than every row read so far, one among the rows still to come.
    let newest = import_id(&svc.app, &dated(&base, "Newest", 1000)).await;
    let middle = import_id(&svc.app, &dated(&base, "Middle", 25)).await;
    let next = first["next"].as_str().unwrap();
    let rest = pages(&svc.app, next).await;
    let read: Vec<String> = std::iter::once(&first).chain(&rest).flat_map(ids).collect();
    for id in &old {
        assert_eq!(
            read.iter().filter(|r| *r == id).count(),
            1,
            "{id} read once"
        );
    }
    assert_eq!(read.iter().filter(|r| **r == middle).count(), 1);
    assert!(
        !read.contains(&newest),
        "a row newer than the cursor belongs to the first page"
    );
    assert_eq!(rest.last().unwrap()["total"], 14);
    svc.storage.close().await;
}

#[tokio::test]
async fn a_calibration_stored_between_page_reads_neither_repeats_nor_skips_an_older_row() {
    common::on_every_empty_database(|url, _| insert_between_pages(url)).await;
}

async fn filter_and_page(url: String) {
    let svc = open_service(&url).await;
    let base = table("Base");
    let mut brackets = std::collections::BTreeSet::new();
    for i in 0..9 {
        brackets.insert(import_id(&svc.app, &dated(&base, &format!("Bracket {i}"), i)).await);
        import_id(&svc.app, &dated(&base, &format!("Hook {i}"), i)).await;
    }
    let archived = brackets.iter().next().unwrap().clone();
    let archive = post(
        &svc.app,
        &format!("/api/v1/calibrations/{archived}/archive"),
        "application/json",
        vec![],
    )
    .await;
    assert_eq!(archive.status, StatusCode::OK);

    let visible = pages(&svc.app, "/api/v1/calibrations?q=BRACKET&limit=4").await;
    assert_eq!(visible.len(), 2);
    assert!(visible.iter().all(|p| p["total"] == 8));
    let read: std::collections::BTreeSet<String> = visible.iter().flat_map(ids).collect();
    assert_eq!(read.len(), 8);
    assert!(read.is_subset(&brackets) && !read.contains(&archived));
    assert!(visible[0]["next"].as_str().unwrap().contains("q=BRACKET"));

    let all = pages(
        &svc.app,
        "/api/v1/calibrations?q=bracket&include_archived=true&limit=4",
    )
    .await;
    assert_eq!(all.len(), 3);
    assert!(all.iter().all(|p| p["total"] == 9));
    let read: std::collections::BTreeSet<String> = all.iter().flat_map(ids).collect();
    assert_eq!(read, brackets);

    // The cursor of the bracket search, sent with another search.
    let next = visible[0]["next"].as_str().unwrap();
    let cursor = next
        .split("cursor=")
        .nth(1)
        .unwrap()
        .split('&')
        .next()
        .unwrap();
    let reply = get(
        &svc.app,
        &format!("/api/v1/calibrations?q=hook&cursor={cursor}"),
    )
    .await;
    assert_eq!(reply.status, StatusCode::BAD_REQUEST);
    assert_eq!(reply.error_code(), "invalid_cursor");
    assert!(
        reply.error_message().contains("cursor") && reply.error_message().contains("another query")
    );
    svc.storage.close().await;
}

#[tokio::test]
async fn a_search_pages_through_its_own_matches_and_counts_them_with_or_without_archived_ones() {
    common::on_every_empty_database(|url, _| filter_and_page(url)).await;
}

#[tokio::test]
async fn a_bad_limit_or_cursor_answers_400_naming_the_parameter() {
    let svc = service().await;
    for (query, field, code) in [
        ("limit=0", "limit", "invalid_query"),
        ("limit=501", "limit", "invalid_query"),
        ("limit=many", "limit", "invalid_query"),
        ("cursor=zz", "cursor", "invalid_cursor"),
        ("cursor=6869", "cursor", "invalid_cursor"),
    ] {
        let reply = get(&svc.app, &format!("/api/v1/calibrations?{query}")).await;
        assert_eq!(reply.status, StatusCode::BAD_REQUEST, "{query}");
        assert_eq!(reply.error_code(), code, "{query}");
        assert!(
            reply.error_message().contains(field),
            "{query}: {}",
            reply.error_message()
        );
    }
}

/// Imports `t` as a correction of `old`; returns the reply.
async fn correct(
    app: &axum::Router,
    old: &str,
    t: &isotint_core::CalibrationTable,
) -> common::Reply {
    post(
        app,
        &format!("/api/v1/calibrations/import?supersedes={old}"),
        "application/json",
        t.to_json().into_bytes(),
    )
    .await
}

async fn chain_of_three(url: String) {
    let svc = open_service(&url).await;
    let first = import_id(&svc.app, &table("Strip, first")).await;
    let second = correct(&svc.app, &first, &table("Strip, second"))
        .await
        .json()["id"]
        .as_str()
        .unwrap()
        .to_string();
    let third = correct(&svc.app, &second, &table("Strip, third"))
        .await
        .json()["id"]
        .as_str()
        .unwrap()
        .to_string();
    for (old, by) in [(&first, &second), (&second, &third)] {
        let reply = correct(&svc.app, old, &table(&format!("Rival of {old}"))).await;
        assert_eq!(reply.status, StatusCode::CONFLICT);
        let message = reply.error_message();
        assert!(
            message.contains(&format!("already superseded by {by}")),
            "{message}"
        );
        assert!(
            message.contains(&format!("correct the latest version, {third}")),
            "{message}"
        );
        assert_eq!(reply.json()["error"]["latest"], third.as_str());
    }
    let fourth = correct(&svc.app, &third, &table("Strip, fourth")).await;
    assert_eq!(
        fourth.status,
        StatusCode::CREATED,
        "the latest version may be corrected"
    );
    assert_eq!(fourth.json()["supersedes"], third.as_str());
    svc.storage.close().await;
}

#[tokio::test]
async fn correcting_a_corrected_calibration_answers_409_naming_the_latest_of_a_chain_of_three() {
    common::on_every_empty_database(|url, _| chain_of_three(url)).await;
}
