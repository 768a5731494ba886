//! Token mode: the one middleware that checks `Authorization: Bearer TOKEN` on every API route,
//! and [`POLICY`], the one table of which role each operation needs. In open mode it lets
//! every request in.
//!
//! The middleware also records who is asking ([`Origin`]: the token's name or open mode, and
//! the client's address) for the handlers that write the audit trail, and the caller's [`Role`]
//! (an admin's in open mode) for `GET /api/v1/session`.
//!
//! The token is looked up in the database on every request (no cache), so a token revoked
//! through any replica or the command line is refused by every replica from the next request.

use std::net::SocketAddr;

use axum::extract::connect_info::ConnectInfo;
use axum::extract::{FromRequestParts, MatchedPath, Request, State};
use axum::http::request::Parts;
use axum::http::{header, HeaderMap, Method};
use axum::middleware::Next;
use axum::response::Response;
use time::OffsetDateTime;
use utoipa::openapi::path::{Operation, PathItem};
use utoipa::openapi::security::{HttpAuthScheme, HttpBuilder, SecurityRequirement, SecurityScheme};
use utoipa::openapi::{ContentBuilder, OpenApi, Ref, ResponseBuilder};

use super::error::ApiError;
use super::AppState;
use crate::access::{AccessMode, Actor, Origin, Role, Token};
use crate::storage::tokens;

/// Who may call an API operation in token mode.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Access {
    /// Anyone, without a token.
    Anyone,
    /// A token of this role or a more privileged one.
    AtLeast(Role),
}

/// The role each API operation needs, by method and route as the router spells it. An
/// operation missing here needs an admin (a test checks that none is missing).
const POLICY: &[(Method, &str, Access)] = &[
    (Method::GET, "/api/v1/health", Access::Anyone),
    (Method::GET, "/api/v1/session", READER),
    (Method::GET, super::metrics::ROUTE, READER),
    (Method::GET, "/api/v1/calibrations", READER),
    (Method::GET, "/api/v1/calibrations/{id}", READER),
    (Method::GET, "/api/v1/calibrations/{id}/export", READER),
    (Method::POST, "/api/v1/order-maps", READER),
    (Method::GET, "/api/v1/order-maps/{id}", READER),
    (Method::GET, "/api/v1/order-maps/{id}/{file}", READER),
    (Method::POST, "/api/v1/order-maps/{id}/boundary", READER),
    (Method::POST, "/api/v1/order-maps/{id}/comparison", READER),
    (Method::POST, "/api/v1/series", READER),
    (Method::POST, "/api/v1/reports", READER),
    (Method::POST, "/api/v1/order-maps/{id}/report", READER),
    (Method::POST, "/api/v1/calibrations", WRITER),
    (Method::POST, "/api/v1/calibrations/import", WRITER),
    (Method::POST, "/api/v1/calibrations/{id}/archive", ADMIN),
    (Method::POST, "/api/v1/calibrations/{id}/restore", ADMIN),
    (Method::GET, "/api/v1/audit", ADMIN),
];

const READER: Access = Access::AtLeast(Role::Reader);
const WRITER: Access = Access::AtLeast(Role::Writer);
const ADMIN: Access = Access::AtLeast(Role::Admin);

/// The entry of [`POLICY`] for an operation, if it has one.
fn listed(method: &Method, route: &str) -> Option<Access> {
    POLICY
        .iter()
        .find(|(m, r, _)| m == method && *r == route)
        .map(|(_, _, access)| *access)
}

/// Who may call an operation: its [`POLICY`] entry, an admin if it has none.
pub fn access(method: &Method, route: &str) -> Access {
    listed(method, route).unwrap_or(ADMIN)
}

/// The operations `role` may call, as `METHOD /route`, in the order of [`POLICY`].
pub fn allowed(role: Role) -> Vec<String> {
    POLICY
        .iter()
        .filter(|(_, _, access)| match access {
            Access::Anyone => true,
            Access::AtLeast(needed) => role >= *needed,
        })
        .map(|(method, route, _)| format!("{method} {route}"))
        .collect()
}

/// Name of the security scheme in the OpenAPI document.
const SCHEME: &str = "bearer";

/// The operations of a path item, by method.
fn operations(item: &mut PathItem) -> [(Method, &mut Option<Operation>); 5] {
    [
        (Method::GET, &mut item.get),
        (Method::POST, &mut item.post),
        (Method::PUT, &mut item.put),
        (Method::DELETE, &mut item.delete),
        (Method::PATCH, &mut item.patch),
    ]
}

/// Describes token mode in `doc`: the bearer scheme, and on every operation that needs a token
/// that requirement with its 401 and 403 answers, as [`POLICY`] says.
pub fn document(doc: &mut OpenApi) {
    let scheme = HttpBuilder::new()
        .scheme(HttpAuthScheme::Bearer)
        .description(Some(
            "In token mode (on by default when the service listens beyond loopback or uses              PostgreSQL) every operation but the health check needs `Authorization: Bearer              TOKEN`; an admin makes tokens with `isotint token create`. In open mode none does.",
        ))
        .build();
    doc.components
        .get_or_insert_with(Default::default)
        .add_security_scheme(SCHEME, SecurityScheme::Http(scheme));
    let error = |description: String| {
        ResponseBuilder::new()
            .description(description)
            .content(
                "application/json",
                ContentBuilder::new()
                    .schema(Some(Ref::from_schema_name("ErrorBody")))
                    .build(),
            )
            .build()
    };
    for (route, item) in doc.paths.paths.iter_mut() {
        for (method, operation) in operations(item) {
            let (Some(operation), Access::AtLeast(role)) =
                (operation.as_mut(), access(&method, route))
            else {
                continue;
            };
            operation.security = Some(vec![SecurityRequirement::new(SCHEME, [""; 0])]);
            let responses = &mut operation.responses.responses;
            responses.insert(
                "401".into(),
                error("No token, or an unknown or revoked one (token mode)".into()).into(),
            );
            responses.insert(
                "403".into(),
                error(format!(
                    "The token's role may not: this needs {role} or higher"
                ))
                .into(),
            );
        }
    }
}

/// The token of an `Authorization: Bearer TOKEN` header; 401 naming what is wrong.
fn bearer(headers: &HeaderMap) -> Result<Token, ApiError> {
    let unauthorized = |code, message: &str| ApiError::Unauthorized {
        code,
        message: message.to_string(),
    };
    let value = headers.get(header::AUTHORIZATION).ok_or_else(|| {
        unauthorized(
            "missing_token",
            "this service asks for a token: send Authorization: Bearer TOKEN \
             (an admin makes one with `isotint token create`)",
        )
    })?;
    let value = value.to_str().unwrap_or_default();
    let (scheme, credentials) = value.split_once(' ').unwrap_or((value, ""));
    if !scheme.eq_ignore_ascii_case("bearer") {
        return Err(unauthorized(
            "invalid_token",
            "the Authorization header must read Bearer TOKEN",
        ));
    }
    Token::parse(credentials.trim()).ok_or_else(|| {
        unauthorized(
            "invalid_token",
            "the bearer token is not an isotint token (isotint_ and 64 hex digits)",
        )
    })
}

/// Middleware of the API routes: in token mode, refuses a request without a known,
/// unrevoked token (401) or whose token's role may not call the route (403).
pub async fn authorize(
    State(state): State<AppState>,
    mut request: Request,
    next: Next,
) -> Result<Response, ApiError> {
    let address = request
        .extensions()
        .get::<ConnectInfo<SocketAddr>>()
        .map(|ConnectInfo(peer)| peer.ip());
    if state.config.access == AccessMode::Open {
        let origin = Origin {
            actor: Actor::OpenMode,
            address,
        };
        request.extensions_mut().insert(origin);
        // Open mode opens every operation: the caller may do what an admin may.
        request.extensions_mut().insert(Role::Admin);
        return Ok(next.run(request).await);
    }
    let route = request.extensions().get::<MatchedPath>().map_or_else(
        || request.uri().path().to_string(),
        |p| p.as_str().to_string(),
    );
    let Access::AtLeast(needed) = access(request.method(), &route) else {
        return Ok(next.run(request).await);
    };
    let token = bearer(request.headers())?;
    let found = tokens::active(&state.storage, &token.sha256())
        .await?
        .ok_or_else(|| ApiError::Unauthorized {
            code: "unknown_token",
            message: "the bearer token is unknown or revoked".into(),
        })?;
    if found.role < needed {
        return Err(ApiError::Forbidden(format!(
            "the token {} has the role {}; {} {route} needs {needed} or higher",
            found.name,
            found.role,
            request.method()
        )));
    }
    if let Err(e) = tokens::mark_used(&state.storage, &found, OffsetDateTime::now_utc()).await {
        tracing::warn!(error = %e, token = %found.name, "could not record the token's last use");
    }
    let origin = Origin {
        actor: Actor::Token(found.name),
        address,
    };
    request.extensions_mut().insert(origin);
    request.extensions_mut().insert(found.role);
    Ok(next.run(request).await)
}

/// Who asks, as [`authorize`] found out; a handler that writes takes it for the audit trail.
impl<S: Send + Sync> FromRequestParts<S> for Origin {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, _: &S) -> Result<Origin, ApiError> {
        parts.extensions.get::<Origin>().cloned().ok_or_else(|| {
            ApiError::Internal(format!(
                "{} is not behind the access check",
                parts.uri.path()
            ))
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_api_operation_has_its_own_entry_in_the_policy() {
        let (_, mut doc) = super::super::api();
        for (route, item) in doc.paths.paths.iter_mut() {
            for (method, operation) in operations(item) {
                assert!(
                    operation.is_none() || listed(&method, route).is_some(),
                    "{method} {route} is missing from POLICY"
                );
            }
        }
    }

    #[test]
    fn a_reader_may_read_and_map_but_not_write_and_an_admin_may_call_everything() {
        let reader = allowed(Role::Reader);
        assert!(reader.contains(&"GET /api/v1/calibrations".to_string()));
        assert!(reader.contains(&"POST /api/v1/order-maps".to_string()));
        assert!(!reader.contains(&"POST /api/v1/calibrations".to_string()));
        let writer = allowed(Role::Writer);
        assert!(writer.contains(&"POST /api/v1/calibrations/import".to_string()));
        assert!(!writer.contains(&"GET /api/v1/audit".to_string()));
        assert_eq!(allowed(Role::Admin).len(), POLICY.len());
    }

    #[test]
    fn engineering_results_are_documented_and_need_only_a_reader() {
        let (_, doc) = super::super::api();
        for route in [
            "/api/v1/series",
            "/api/v1/order-maps/{id}/comparison",
            "/api/v1/reports",
            "/api/v1/order-maps/{id}/report",
        ] {
            assert!(doc.paths.paths.contains_key(route), "{route} undocumented");
        }
        for route in [
            "/api/v1/series",
            "/api/v1/order-maps/{id}/comparison",
            "/api/v1/order-maps/{id}/boundary",
            "/api/v1/reports",
            "/api/v1/order-maps/{id}/report",
        ] {
            assert_eq!(access(&Method::POST, route), READER, "{route}");
        }
    }

    #[test]
    fn archiving_needs_an_admin_and_health_needs_nobody() {
        let archive = access(&Method::POST, "/api/v1/calibrations/{id}/archive");
        assert_eq!(archive, Access::AtLeast(Role::Admin));
        assert_eq!(access(&Method::GET, "/api/v1/health"), Access::Anyone);
        assert_eq!(
            access(&Method::DELETE, "/api/v1/unlisted"),
            Access::AtLeast(Role::Admin)
        );
    }
}
