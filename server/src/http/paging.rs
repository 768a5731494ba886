//! Paged lists: the page size, the opaque cursor of the next page and its link, shared by every
//! list that pages newest first by (time, id).

use time::OffsetDateTime;

use super::error::ApiError;
use crate::domain::{from_unix_ms, unix_ms, Cursor};

/// Rows of a page unless `limit` says otherwise.
pub const DEFAULT_LIMIT: i64 = 50;
/// Most rows of a page.
pub const MAX_LIMIT: i64 = 500;

/// The page size `limit` asks for; 400 naming it when out of range.
pub fn page_limit(limit: Option<i64>) -> Result<i64, ApiError> {
    match limit {
        None => Ok(DEFAULT_LIMIT),
        Some(n) if (1..=MAX_LIMIT).contains(&n) => Ok(n),
        Some(n) => Err(ApiError::bad_request(
            "invalid_query",
            format!("limit must lie in 1–{MAX_LIMIT}, got {n}"),
        )),
    }
}

/// Reads the `cursor` parameter of a list whose other parameters are `scope`: the time and id
/// of the row the page starts after. 400 naming `cursor` for one that is not a cursor of this
/// list or belongs to another query.
pub fn page_after(text: Option<&str>, scope: &str) -> Result<Option<Cursor>, ApiError> {
    text.map(|text| Cursor::decode(text, scope))
        .transpose()
        .map_err(|e| ApiError::bad_request("invalid_cursor", e.to_string()))
}

/// The storage key of the row a cursor names.
pub fn cursor_key(cursor: &Cursor) -> (OffsetDateTime, &str) {
    (from_unix_ms(cursor.at_ms), cursor.id.as_str())
}

/// Cuts `rows`, read with room for one more than `limit`, to one page and returns the link to
/// the next page (`path?limit=…&cursor=…` followed by `scope`), or `None` when this page is the
/// last. `key` gives a row's time and id.
pub fn next_link<T>(
    rows: &mut Vec<T>,
    limit: i64,
    path: &str,
    scope: &str,
    key: impl Fn(&T) -> (OffsetDateTime, String),
) -> Option<String> {
    if rows.len() as i64 <= limit {
        return None;
    }
    rows.truncate(limit as usize);
    rows.last().map(|last| {
        let (at, id) = key(last);
        let cursor = Cursor {
            query: scope.to_string(),
            at_ms: unix_ms(at),
            id,
        };
        format!("{path}?limit={limit}&cursor={}{scope}", cursor.encode())
    })
}
