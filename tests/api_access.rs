//! Token mode through the real router, on SQLite and (when `ISOTINT_TEST_POSTGRES_URL` is set)
//! PostgreSQL: who is let in, who is refused and why.

mod common;

use axum::body::Body;
use axum::http::{header, Method, Request, StatusCode};
use axum::Router;
use isotint::access::{AccessMode, Role, Token, TokenName};
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

/// Makes a token named `name` with `role`, as `isotint token create` does; returns it.
async fn token(storage: &Storage, name: &str, role: Role) -> String {
    let token = Token::generate().unwrap();
    let name: TokenName = name.parse().unwrap();
    tokens::create(storage, &name, role, &token.sha256())
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
    let request = request
        .header(header::CONTENT_TYPE, "application/json")
        .body(Body::from(body.to_string()))
        .unwrap();
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
        for replica in [&first.app, &second.app] {
            let reply = call(
                replica,
                Method::GET,
                "/api/v1/calibrations",
                Some(&reader),
                "",
            )
            .await;
            assert_eq!(reply.status, StatusCode::OK);
        }
        tokens::revoke(&first.storage, &"lab-reader".parse().unwrap())
            .await
            .unwrap();
        for replica in [&first.app, &second.app] {
            let reply = call(
                replica,
                Method::GET,
                "/api/v1/calibrations",
                Some(&reader),
                "",
            )
            .await;
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
