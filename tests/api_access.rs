//! Token mode through the real router, on SQLite and (when `ISOTINT_TEST_POSTGRES_URL` is set)
//! PostgreSQL: who is let in, who is refused and why.

mod common;

use std::net::SocketAddr;

use axum::body::Body;
use axum::extract::connect_info::ConnectInfo;
use axum::http::{header, Method, Request, StatusCode};
use axum::Router;
use isotint::access::{AccessMode, Actor, Origin, Role, Token, TokenName};
use isotint::config::ServiceConfig;
use isotint::storage::{tokens, Storage};
use sqlx::Row;

use common::{send, Reply};

/// Configuration of a service in token mode.
fn token_mode() -> ServiceConfig {
    ServiceConfig {
        access: AccessMode::Tokens,
        ..ServiceConfig::default()
    }
}

/// An admin on the database's machine, as `isotint token …` records itself.
fn admin_at_the_console() -> Origin {
    Origin::local(Actor::CommandLine)
}

/// Makes a token named `name` with `role`, as `isotint token create` does; returns it.
async fn token(storage: &Storage, name: &str, role: Role) -> String {
    let token = Token::generate().unwrap();
    let name: TokenName = name.parse().unwrap();
    tokens::create(
        storage,
        &name,
        role,
        &token.sha256(),
        &admin_at_the_console(),
    )
    .await
    .unwrap();
    token.reveal().to_string()
}

/// Sends `method uri` with `Authorization: Bearer token` when a token is given; a POST carries
/// `body` as JSON.
async fn call(app: &Router, method: Method, uri: &str, token: Option<&str>, body: &str) -> Reply {
    let mut request = Request::builder().method(method).uri(uri);
    if let Some(token) = token {
        request = request.header(header::AUTHORIZATION, format!("Bearer {token}"));
    }
    let mut request = request
        .header(header::CONTENT_TYPE, "application/json")
        .body(Body::from(body.to_string()))
        .unwrap();
    // The address `service::serve` passes on for each connection.
    let peer: SocketAddr = "127.0.0.1:40000".parse().unwrap();
    request.extensions_mut().insert(ConnectInfo(peer));
    send(app, request).await
}

/// A service in token mode on the database at `url`.
async fn service_in_token_mode(url: &str) -> common::TestService {
    common::service_on(url, token_mode(), tempfile::tempdir().unwrap()).await
}

#[tokio::test]
async fn each_role_may_do_what_it_is_given_and_is_refused_the_rest_on_every_backend() {
    common::on_every_empty_database(|url, _| async move {
        let svc = service_in_token_mode(&url).await;
        let app = &svc.app;
        let reader = token(&svc.storage, "reader", Role::Reader).await;
        let writer = token(&svc.storage, "writer", Role::Writer).await;
        let admin = token(&svc.storage, "admin", Role::Admin).await;
        let table = common::table("Strip under access control").to_json();

        let health = call(app, Method::GET, "/api/v1/health", None, "").await;
        assert_eq!(health.status, StatusCode::OK, "health needs no token");
        let anonymous = call(app, Method::GET, "/api/v1/calibrations", None, "").await;
        assert_eq!(anonymous.status, StatusCode::UNAUTHORIZED);
        assert_eq!(anonymous.error_code(), "missing_token");
        assert_eq!(anonymous.headers[header::WWW_AUTHENTICATE], "Bearer");

        let import = "/api/v1/calibrations/import";
        let refused = call(app, Method::POST, import, Some(&reader), &table).await;
        assert_eq!(refused.status, StatusCode::FORBIDDEN);
        let message = refused.error_message();
        assert!(
            message.contains("reader") && message.contains("writer"),
            "{message}"
        );
        let imported = call(app, Method::POST, import, Some(&writer), &table).await;
        assert_eq!(imported.status, StatusCode::CREATED);
        let id = imported.json()["id"].as_str().unwrap().to_string();

        let listed = call(app, Method::GET, "/api/v1/calibrations", Some(&reader), "").await;
        assert_eq!(listed.status, StatusCode::OK);
        let archive = format!("/api/v1/calibrations/{id}/archive");
        for (who, token) in [("reader", &reader), ("writer", &writer)] {
            let reply = call(app, Method::POST, &archive, Some(token), "").await;
            assert_eq!(reply.status, StatusCode::FORBIDDEN, "{who} archived");
            assert!(reply.error_message().contains("admin"), "{who}");
        }
        let archived = call(app, Method::POST, &archive, Some(&admin), "").await;
        assert_eq!(archived.status, StatusCode::OK);
        assert_eq!(archived.json()["archived"], true);
        let restore = format!("/api/v1/calibrations/{id}/restore");
        let restored = call(app, Method::POST, &restore, Some(&admin), "").await;
        assert_eq!(restored.status, StatusCode::OK);
        svc.storage.close().await;
    })
    .await;
}

#[tokio::test]
async fn malformed_and_unknown_tokens_are_refused_with_401_naming_the_problem() {
    let svc = common::service_with(token_mode()).await;
    let unknown = Token::generate().unwrap();
    for (header_value, code) in [
        ("Basic dXNlcjpwdw==".to_string(), "invalid_token"),
        ("Bearer not-a-token".to_string(), "invalid_token"),
        (format!("Bearer {}", unknown.reveal()), "unknown_token"),
    ] {
        let request = Request::get("/api/v1/calibrations")
            .header(header::AUTHORIZATION, &header_value)
            .body(Body::empty())
            .unwrap();
        let reply = send(&svc.app, request).await;
        assert_eq!(reply.status, StatusCode::UNAUTHORIZED, "{header_value}");
        assert_eq!(reply.error_code(), code, "{header_value}");
    }
}

#[tokio::test]
async fn a_revoked_token_is_refused_at_once_by_every_replica_on_every_backend() {
    common::on_every_empty_database(|url, _| async move {
        let first = service_in_token_mode(&url).await;
        let second = service_in_token_mode(&url).await;
        let reader = token(&first.storage, "lab-reader", Role::Reader).await;
        let list_on_every_replica = || async {
            let mut replies = Vec::new();
            for replica in [&first.app, &second.app] {
                let path = "/api/v1/calibrations";
                replies.push(call(replica, Method::GET, path, Some(&reader), "").await);
            }
            replies
        };
        for reply in list_on_every_replica().await {
            assert_eq!(reply.status, StatusCode::OK);
        }
        let name = "lab-reader".parse().unwrap();
        tokens::revoke(&first.storage, &name, &admin_at_the_console())
            .await
            .unwrap();
        for reply in list_on_every_replica().await {
            assert_eq!(reply.status, StatusCode::UNAUTHORIZED);
            assert_eq!(reply.error_code(), "unknown_token");
        }
        first.storage.close().await;
        second.storage.close().await;
    })
    .await;
}

#[tokio::test]
async fn the_database_keeps_only_the_hash_of_a_token_on_every_backend() {
    common::on_every_empty_database(|url, _| async move {
        let svc = service_in_token_mode(&url).await;
        let raw = token(&svc.storage, "hashed", Role::Admin).await;
        let rows = sqlx::query("SELECT name, role, token_sha256 FROM api_tokens")
            .fetch_all(svc.storage.pool())
            .await
            .unwrap();
        assert_eq!(rows.len(), 1);
        let stored: Vec<String> = (0..3).map(|i| rows[0].get::<String, _>(i)).collect();
        assert!(stored.iter().all(|column| !column.contains(&raw)));
        assert_eq!(stored[2], Token::parse(&raw).unwrap().sha256());
        svc.storage.close().await;
        if let Some(file) = url.strip_prefix("sqlite://") {
            let file = file.trim_end_matches("?mode=rwc");
            for path in [file.to_string(), format!("{file}-wal")] {
                let bytes = std::fs::read(&path).unwrap_or_default();
                let found = bytes.windows(raw.len()).any(|w| w == raw.as_bytes());
                assert!(!found, "the raw token is in {path}");
            }
        }
    })
    .await;
}

#[tokio::test]
async fn open_mode_lets_every_request_in_without_a_token() {
    let svc = common::service().await;
    let id = common::import_id(&svc.app, &common::table("Open strip")).await;
    let archive = format!("/api/v1/calibrations/{id}/archive");
    let reply = call(&svc.app, Method::POST, &archive, None, "").await;
    assert_eq!(reply.status, StatusCode::OK);
}

#[tokio::test]
async fn the_openapi_document_names_the_bearer_scheme_and_401_and_403_on_protected_operations() {
    let svc = common::service().await;
    let doc = common::get(&svc.app, "/api/v1/openapi.json").await.json();
    assert_eq!(
        doc["components"]["securitySchemes"]["bearer"]["scheme"],
        "bearer"
    );
    let archive = &doc["paths"]["/api/v1/calibrations/{id}/archive"]["post"];
    assert!(archive["security"][0].get("bearer").is_some(), "{archive}");
    assert!(archive["responses"]["401"].is_object());
    assert!(archive["responses"]["403"]["description"]
        .as_str()
        .unwrap()
        .contains("admin"));
    let health = &doc["paths"]["/api/v1/health"]["get"];
    assert!(health.get("security").is_none() && health["responses"].get("401").is_none());
}

/// The actions of the whole audit trail, newest first, read page by page with `limit` 2.
async fn audit_actions(app: &Router, admin: &str) -> Vec<serde_json::Value> {
    let mut events = Vec::new();
    let mut next = Some("/api/v1/audit?limit=2".to_string());
    while let Some(uri) = next {
        let page = call(app, Method::GET, &uri, Some(admin), "").await;
        assert_eq!(page.status, StatusCode::OK, "{}", page.error_message());
        let page = page.json();
        let rows = page["events"].as_array().unwrap();
        assert!(rows.len() <= 2);
        events.extend(rows.iter().cloned());
        next = page["next"].as_str().map(str::to_string);
    }
    events
}

#[tokio::test]
async fn every_change_is_in_the_audit_trail_with_who_what_which_and_where_on_every_backend() {
    common::on_every_empty_database(|url, _| async move {
        let svc = service_in_token_mode(&url).await;
        let app = &svc.app;
        let writer = token(&svc.storage, "lab-writer", Role::Writer).await;
        let admin = token(&svc.storage, "lab-admin", Role::Admin).await;
        let import = "/api/v1/calibrations/import";
        let original = common::table("Audited original").to_json();
        let imported = call(app, Method::POST, import, Some(&writer), &original).await;
        let id = imported.json()["id"].as_str().unwrap().to_string();
        let correct = format!("{import}?supersedes={id}");
        let correction = common::table("Audited correction").to_json();
        let corrected = call(app, Method::POST, &correct, Some(&writer), &correction).await;
        let correction_id = corrected.json()["id"].as_str().unwrap().to_string();
        for action in ["archive", "restore"] {
            let uri = format!("/api/v1/calibrations/{id}/{action}");
            let reply = call(app, Method::POST, &uri, Some(&admin), "").await;
            assert_eq!(reply.status, StatusCode::OK);
        }

        let events = audit_actions(app, &admin).await;
        let seen: Vec<(&str, &str, &str)> = events
            .iter()
            .map(|e| {
                let field = |name: &str| e[name].as_str().unwrap_or("");
                (field("actor"), field("action"), field("calibration_id"))
            })
            .collect();
        assert_eq!(
            seen,
            [
                ("lab-admin", "restore", id.as_str()),
                ("lab-admin", "archive", id.as_str()),
                ("lab-writer", "supersede", correction_id.as_str()),
                ("lab-writer", "import", id.as_str()),
                ("command line", "token_create", ""),
                ("command line", "token_create", ""),
            ]
        );
        assert_eq!(events[0]["address"], "127.0.0.1");
        assert!(events[2]["detail"].as_str().unwrap().contains(&id));
        assert!(events[4]["address"].is_null());

        let of_one = format!("/api/v1/audit?calibration={correction_id}");
        let page = call(app, Method::GET, &of_one, Some(&admin), "")
            .await
            .json();
        assert_eq!(page["events"].as_array().unwrap().len(), 1);
        let writers = call(app, Method::GET, "/api/v1/audit", Some(&writer), "").await;
        assert_eq!(writers.status, StatusCode::FORBIDDEN);
        svc.storage.close().await;
    })
    .await;
}

#[tokio::test]
async fn a_cursor_of_another_query_and_an_out_of_range_limit_are_refused_naming_them() {
    let svc = common::service().await;
    for i in 0..3 {
        common::import_id(&svc.app, &common::table(&format!("Strip {i}"))).await;
    }
    let first = common::get(&svc.app, "/api/v1/audit?limit=1").await.json();
    let next = first["next"].as_str().unwrap();
    let cursor = next.split("cursor=").nth(1).unwrap();
    let id = uuid::Uuid::new_v4();
    let other = format!("/api/v1/audit?cursor={cursor}&calibration={id}");
    for (uri, word) in [
        (other.as_str(), "cursor"),
        ("/api/v1/audit?cursor=nonsense", "cursor"),
        ("/api/v1/audit?limit=0", "limit"),
        ("/api/v1/audit?limit=501", "limit"),
    ] {
        let reply = common::get(&svc.app, uri).await;
        assert_eq!(reply.status, StatusCode::BAD_REQUEST, "{uri}");
        assert!(reply.error_message().contains(word), "{uri}");
    }
    let events = common::get(&svc.app, "/api/v1/audit").await.json();
    assert_eq!(events["events"][0]["actor"], "open mode");
}

/// Rows of the audit trail.
async fn audit_rows(storage: &Storage) -> i64 {
    sqlx::query_scalar("SELECT COUNT(*) FROM audit_events")
        .fetch_one(storage.pool())
        .await
        .unwrap()
}

#[tokio::test]
async fn a_change_that_fails_leaves_no_audit_row_and_no_change_is_made_without_one_on_every_backend(
) {
    common::on_every_empty_database(|url, _| async move {
        let svc =
            common::service_on(&url, ServiceConfig::default(), tempfile::tempdir().unwrap()).await;
        let app = &svc.app;
        let id = common::import_id(app, &common::table("Original")).await;
        let correct = format!("/api/v1/calibrations/import?supersedes={id}");
        let first = common::table("First correction").to_json();
        assert_eq!(
            call(app, Method::POST, &correct, None, &first).await.status,
            StatusCode::CREATED
        );
        let before = audit_rows(&svc.storage).await;
        let second = common::table("Second correction").to_json();
        let late = call(app, Method::POST, &correct, None, &second).await;
        assert_eq!(late.status, StatusCode::CONFLICT);
        let unknown = format!("/api/v1/calibrations/{}/archive", uuid::Uuid::new_v4());
        assert_eq!(
            call(app, Method::POST, &unknown, None, "").await.status,
            StatusCode::NOT_FOUND
        );
        assert_eq!(
            audit_rows(&svc.storage).await,
            before,
            "failed changes left rows"
        );

        // Without a place for its audit row, a change is not made at all.
        sqlx::query("DROP TABLE audit_events")
            .execute(svc.storage.writer())
            .await
            .unwrap();
        let unaudited = common::import(app, &common::table("Unaudited")).await;
        assert_eq!(unaudited.status, StatusCode::INTERNAL_SERVER_ERROR);
        let archive = format!("/api/v1/calibrations/{id}/archive");
        let archived = call(app, Method::POST, &archive, None, "").await;
        assert_eq!(archived.status, StatusCode::INTERNAL_SERVER_ERROR);
        let listed = common::get(app, "/api/v1/calibrations").await.json();
        let names: Vec<&str> = listed["calibrations"]
            .as_array()
            .unwrap()
            .iter()
            .map(|c| c["name"].as_str().unwrap())
            .collect();
        assert_eq!(names.len(), 2, "{names:?}");
        assert!(!names.contains(&"Unaudited"), "{names:?}");
        svc.storage.close().await;
    })
    .await;
}

#[tokio::test]
async fn metrics_need_a_reader_token_in_token_mode() {
    let dir = tempfile::tempdir().unwrap();
    let url = format!(
        "sqlite://{}?mode=rwc",
        dir.path().join("m.sqlite").display()
    );
    let svc = service_in_token_mode(&url).await;
    let reader = token(&svc.storage, "scraper", Role::Reader).await;
    let anonymous = call(&svc.app, Method::GET, "/metrics", None, "").await;
    assert_eq!(anonymous.status, StatusCode::UNAUTHORIZED);
    assert_eq!(anonymous.error_code(), "missing_token");
    let scraped = call(&svc.app, Method::GET, "/metrics", Some(&reader), "").await;
    assert_eq!(scraped.status, StatusCode::OK);
    let text = String::from_utf8(scraped.body).unwrap();
    assert!(text.contains("route=\"/metrics\",status=\"401\""), "{text}");
}

#[tokio::test]
async fn the_session_names_the_token_its_role_and_the_operations_it_may_call() {
    let svc = common::service_with(token_mode()).await;
    let app = &svc.app;
    let reader = token(&svc.storage, "bay-reader", Role::Reader).await;
    let admin = token(&svc.storage, "bay-admin", Role::Admin).await;

    let anonymous = call(app, Method::GET, "/api/v1/session", None, "").await;
    assert_eq!(anonymous.status, StatusCode::UNAUTHORIZED);

    let session = call(app, Method::GET, "/api/v1/session", Some(&reader), "").await;
    assert_eq!(session.status, StatusCode::OK);
    let v = session.json();
    assert_eq!(v["mode"], "tokens");
    assert_eq!(v["name"], "bay-reader");
    assert_eq!(v["role"], "reader");
    let allowed: Vec<&str> = v["allowed"]
        .as_array()
        .unwrap()
        .iter()
        .map(|a| a.as_str().unwrap())
        .collect();
    assert!(allowed.contains(&"GET /api/v1/calibrations/{id}"), "{v}");
    assert!(allowed.contains(&"POST /api/v1/order-maps"), "{v}");
    assert!(!allowed.contains(&"POST /api/v1/calibrations"), "{v}");
    assert!(!allowed.contains(&"GET /api/v1/audit"), "{v}");

    let v = call(app, Method::GET, "/api/v1/session", Some(&admin), "")
        .await
        .json();
    assert_eq!(v["role"], "admin");
    let archive = "POST /api/v1/calibrations/{id}/archive";
    assert!(
        v["allowed"]
            .as_array()
            .unwrap()
            .iter()
            .any(|a| a == archive),
        "{v}"
    );
    svc.storage.close().await;
}

#[tokio::test]
async fn in_open_mode_the_session_has_no_name_and_may_do_everything() {
    let svc = common::service().await;
    let v = call(&svc.app, Method::GET, "/api/v1/session", None, "")
        .await
        .json();
    assert_eq!(v["mode"], "open");
    assert_eq!(v["name"], serde_json::Value::Null);
    assert_eq!(v["role"], "admin");
    assert!(
        v["allowed"]
            .as_array()
            .unwrap()
            .iter()
            .any(|a| a == "GET /api/v1/audit"),
        "{v}"
    );
    svc.storage.close().await;
}
