//! The calibration resources through the real router: health, import, list and search,
//! export, corrections, archive and restore, and the OpenAPI document.

mod common;

use axum::http::StatusCode;
use common::{get, import, import_id, post, service, table};

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
    let config = isotint::config::ServiceConfig {
        job_queue: 16,
        ..isotint::config::ServiceConfig::default()
    };
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
