//! Domain types of the service, parsed once at the edge (CLI flags, HTTP paths and bodies):
//! typed ids, timestamps and checked free-text fields.

use std::fmt;
use std::hash::{Hash, Hasher};
use std::marker::PhantomData;
use std::str::FromStr;

use isotint_core::beam::{BeamSpec, EdgeLoad};
use isotint_core::calibration::{MAX_NOTES_CHARS, ORDER_STEP_RANGE};
use isotint_core::{CalibrationMetadata, CoreError, CoreResult, PixelRect};
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use time::OffsetDateTime;
use uuid::Uuid;

/// What an [`Id`] identifies; names the thing in messages.
pub trait IdKind {
    /// Noun used in messages, e.g. "calibration".
    const NOUN: &'static str;
}

/// Marker of calibration ids.
#[derive(Debug)]
pub enum CalibrationKind {}

impl IdKind for CalibrationKind {
    const NOUN: &'static str = "calibration";
}

/// Marker of order-map ids.
#[derive(Debug)]
pub enum OrderMapKind {}

impl IdKind for OrderMapKind {
    const NOUN: &'static str = "order map";
}

/// A random UUID that identifies one kind of stored thing.
pub struct Id<K>(Uuid, PhantomData<fn() -> K>);

/// Id of a stored calibration.
pub type CalibrationId = Id<CalibrationKind>;
/// Id of a stored order map.
pub type OrderMapId = Id<OrderMapKind>;

impl<K: IdKind> Id<K> {
    /// A fresh random id.
    pub fn random() -> Self {
        Id(Uuid::new_v4(), PhantomData)
    }
}

impl<K> Clone for Id<K> {
    fn clone(&self) -> Self {
        *self
    }
}
impl<K> Copy for Id<K> {}
impl<K> PartialEq for Id<K> {
    fn eq(&self, other: &Self) -> bool {
        self.0 == other.0
    }
}
impl<K> Eq for Id<K> {}
impl<K> Hash for Id<K> {
    fn hash<H: Hasher>(&self, state: &mut H) {
        self.0.hash(state);
    }
}
impl<K> fmt::Debug for Id<K> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "Id({})", self.0)
    }
}
impl<K> fmt::Display for Id<K> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        self.0.hyphenated().fmt(f)
    }
}

impl<K: IdKind> FromStr for Id<K> {
    type Err = CoreError;

    /// Reads the hyphenated form only (`8-4-4-4-12` hex digits), the one ids are written in
    /// and the OpenAPI description's `format: uuid`.
    fn from_str(text: &str) -> CoreResult<Self> {
        Some(text)
            .filter(|t| t.len() == 36)
            .and_then(|t| Uuid::try_parse(t).ok())
            .map(|u| Id(u, PhantomData))
            .ok_or_else(|| {
                CoreError::invalid(
                    "id",
                    format!(
                        "{:?} is not a {} id (expected a UUID)",
                        shorten(text, 60),
                        K::NOUN
                    ),
                )
            })
    }
}

impl<K> Serialize for Id<K> {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(self)
    }
}

impl<'de, K: IdKind> Deserialize<'de> for Id<K> {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let text = String::deserialize(d)?;
        text.parse().map_err(serde::de::Error::custom)
    }
}

/// The first `max` characters of `text`, with "…" when cut (for echoing input in messages).
pub fn shorten(text: &str, max: usize) -> String {
    if text.chars().count() <= max {
        text.to_string()
    } else {
        text.chars().take(max).chain(std::iter::once('…')).collect()
    }
}

/// The stem of a downloaded map file's name (`disc-03-orders` in `disc-03-orders-stress.npy`):
/// 1–100 ASCII letters, digits, `.`, `_` or `-`, not starting with `.`, so that it is safe in a
/// file name and in a Content-Disposition header.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FileStem(String);

impl FileStem {
    /// Longest stem, characters.
    pub const MAX_CHARS: usize = 100;
    /// Longest part of a photo's name kept in [`FileStem::of_photo`], characters.
    const PHOTO_CHARS: usize = 80;

    /// Checks a stem as a client gave it; the error names `name`.
    pub fn parse(text: &str) -> CoreResult<FileStem> {
        if text.is_empty()
            || text.len() > Self::MAX_CHARS
            || text.starts_with('.')
            || !text.chars().all(Self::allowed)
        {
            return Err(CoreError::invalid(
                "name",
                format!(
                    "{:?}; use 1–{} letters, digits, '.', '_' or '-', not starting with '.'",
                    shorten(text, 40),
                    Self::MAX_CHARS
                ),
            ));
        }
        Ok(FileStem(text.to_string()))
    }

    /// The stem of a map of the photo uploaded as `file_name`: the name without its folders
    /// and extension, each run of other characters replaced by `_`, without leading dots or
    /// `_`, at most 80 characters, then `-orders` (`disc 03.png` → `disc_03-orders`); `None`
    /// when nothing is left.
    pub fn of_photo(file_name: &str) -> Option<FileStem> {
        let base = file_name.rsplit(['/', '\\']).next().unwrap_or_default();
        let bare = base.rsplit_once('.').map_or(base, |(stem, _)| stem);
        let mut stem = String::new();
        for c in bare.chars() {
            if Self::allowed(c) {
                stem.push(c);
            } else if !stem.ends_with('_') {
                stem.push('_');
            }
        }
        let kept: String = stem
            .trim_start_matches(['.', '_'])
            .chars()
            .take(Self::PHOTO_CHARS)
            .collect();
        let kept = kept.trim_end_matches('_');
        (!kept.is_empty()).then(|| FileStem(format!("{kept}-orders")))
    }

    fn allowed(c: char) -> bool {
        c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-')
    }

    /// The stem as text.
    pub fn as_str(&self) -> &str {
        &self.0
    }
}

/// Unix time in milliseconds.
pub fn unix_ms(t: OffsetDateTime) -> i64 {
    (t.unix_timestamp_nanos() / 1_000_000) as i64
}

/// The instant `ms` milliseconds after the Unix epoch (clamped to the representable range).
pub fn from_unix_ms(ms: i64) -> OffsetDateTime {
    OffsetDateTime::from_unix_timestamp_nanos(i128::from(ms) * 1_000_000)
        .unwrap_or(OffsetDateTime::UNIX_EPOCH)
}

/// RFC 3339 text of a UTC instant.
pub fn rfc3339(t: OffsetDateTime) -> String {
    t.format(&time::format_description::well_known::Rfc3339)
        .unwrap_or_else(|_| t.to_string())
}

/// Checks a free-text field: at most `max_chars` characters and no control characters
/// (line breaks and tabs are allowed where `multiline`). The error names the field.
pub fn check_text(
    field: &'static str,
    value: &str,
    max_chars: usize,
    multiline: bool,
) -> CoreResult<()> {
    let count = value.chars().count();
    if count > max_chars {
        return Err(CoreError::invalid(
            field,
            format!("is {count} characters long; at most {max_chars} are allowed"),
        ));
    }
    let allowed = |c: char| multiline && matches!(c, '\n' | '\r' | '\t');
    if let Some(c) = value.chars().find(|c| c.is_control() && !allowed(*c)) {
        return Err(CoreError::invalid(
            field,
            format!("contains the control character U+{:04X}", u32::from(c)),
        ));
    }
    Ok(())
}

/// Checks every text field of calibration metadata (name 1–200 characters, other short fields
/// up to 200, notes up to 4000) and the thickness; messages name the field.
pub fn check_metadata(m: &CalibrationMetadata) -> CoreResult<()> {
    if m.name.trim().is_empty() {
        return Err(CoreError::invalid("name", "must not be empty"));
    }
    check_text("name", &m.name, 200, false)?;
    check_text("material", &m.material, 200, false)?;
    check_text("light_source", &m.light_source, 200, false)?;
    check_text("camera", &m.camera, 200, false)?;
    check_text("notes", &m.notes, MAX_NOTES_CHARS, true)?;
    if let Some(t) = m.thickness_mm {
        if !(t.is_finite() && t > 0.0) {
            return Err(CoreError::invalid(
                "thickness_mm",
                format!("must be a positive number of millimetres, got {t}"),
            ));
        }
    }
    Ok(())
}

/// Where a page of a list ends, for the next page to start after: the time and id of the
/// page's last row and the query it belongs to. Clients see it as opaque hex.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Cursor {
    /// The query the page answers (its other parameters, as the list spells them).
    pub query: String,
    /// Time of the last row, Unix milliseconds.
    pub at_ms: i64,
    /// Id of the last row.
    pub id: String,
}

impl Cursor {
    /// The opaque text of the cursor.
    pub fn encode(&self) -> String {
        hex::encode(format!("{}\n{}\n{}", self.at_ms, self.id, self.query))
    }

    /// Reads the cursor `text` of a page of `query`; a cursor that is not one, or that belongs
    /// to another query, is refused naming `cursor`.
    pub fn decode(text: &str, query: &str) -> CoreResult<Cursor> {
        let invalid = |why: &str| CoreError::invalid("cursor", why.to_string());
        let bytes = hex::decode(text).map_err(|_| invalid("is not a cursor of this list"))?;
        let text = String::from_utf8(bytes).map_err(|_| invalid("is not a cursor of this list"))?;
        let mut parts = text.splitn(3, '\n');
        let (Some(at_ms), Some(id), Some(of)) = (parts.next(), parts.next(), parts.next()) else {
            return Err(invalid("is not a cursor of this list"));
        };
        let at_ms = at_ms
            .parse()
            .map_err(|_| invalid("is not a cursor of this list"))?;
        if of != query {
            return Err(invalid(
                "belongs to another query; ask again from the first page",
            ));
        }
        Ok(Cursor {
            query: of.to_string(),
            at_ms,
            id: id.to_string(),
        })
    }
}

/// Default grid spacing of a new calibration table, fringes.
pub const DEFAULT_ORDER_STEP: f64 = 0.01;

/// Builds a checked beam specification from parsed edge input (CLI flags or API JSON): the
/// region is finite and well oriented, the order step (default [`DEFAULT_ORDER_STEP`]) within
/// the format's range, and the metadata passes [`check_metadata`].
pub fn beam_spec(
    region: PixelRect,
    load: EdgeLoad,
    refine_edges: bool,
    order_step: Option<f64>,
    metadata: CalibrationMetadata,
) -> CoreResult<BeamSpec> {
    region.validate()?;
    let order_step = order_step.unwrap_or(DEFAULT_ORDER_STEP);
    let (lo, hi) = ORDER_STEP_RANGE;
    if !(order_step.is_finite() && (lo..=hi).contains(&order_step)) {
        return Err(CoreError::invalid(
            "order_step",
            format!("must lie in [{lo}, {hi}] fringes, got {order_step}"),
        ));
    }
    check_metadata(&metadata)?;
    Ok(BeamSpec {
        region,
        load,
        refine_edges,
        order_step,
        metadata,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_id_round_trips_through_text_and_a_bad_one_names_its_kind() {
        let id = CalibrationId::random();
        assert_eq!(id.to_string().parse::<CalibrationId>().unwrap(), id);
        let err = "nope".parse::<OrderMapId>().unwrap_err().to_string();
        assert!(err.contains("order map id"), "{err}");
        // The other spellings of a UUID are not ids: the description says `format: uuid`.
        let simple = id.to_string().replace('-', "");
        for other in [
            simple,
            format!("{{{id}}}"),
            format!("urn:uuid:{id}"),
            format!(" {id}"),
        ] {
            assert!(other.parse::<CalibrationId>().is_err(), "{other}");
        }
    }

    #[test]
    fn a_photos_file_name_becomes_a_stem_safe_in_a_header_and_one_with_nothing_safe_gives_none() {
        let stem = |name: &str| FileStem::of_photo(name).map(|s| s.as_str().to_string());
        assert_eq!(stem("disc-03.png").as_deref(), Some("disc-03-orders"));
        // Folders (either separator) are dropped, runs of other characters become one `_`.
        assert_eq!(
            stem("C:\\bay 4\\Bracket  #2 (after).jpeg").as_deref(),
            Some("Bracket_2_after-orders")
        );
        assert_eq!(stem("../../.hidden.tif").as_deref(), Some("hidden-orders"));
        for nothing in ["", ".png", "€€€.png", "../"] {
            assert_eq!(stem(nothing), None, "{nothing}");
        }
        // A long name is cut, and every stem made passes the check a client's name must.
        let long = stem(&format!("{}.png", "x".repeat(300))).unwrap();
        assert_eq!(long.len(), FileStem::PHOTO_CHARS + "-orders".len());
        for made in ["disc-03.png", "Ünïcode photo.png", &long] {
            let made = stem(made).unwrap();
            assert_eq!(FileStem::parse(&made).unwrap().as_str(), made);
        }
        for bad in ["", ".hidden", "a\"b", "../etc", &"x".repeat(101)] {
            assert!(
                FileStem::parse(bad)
                    .unwrap_err()
                    .to_string()
                    .contains("name"),
                "{bad}"
            );
        }
    }

    #[test]
    fn control_characters_are_refused_except_line_breaks_in_notes() {
        assert!(check_text("name", "a\u{7}b", 10, false).is_err());
        assert!(check_text("notes", "a\nb", 10, true).is_ok());
        assert!(check_text("name", &"x".repeat(11), 10, false).is_err());
    }

    #[test]
    fn a_cursor_round_trips_and_one_of_another_query_is_refused() {
        let cursor = Cursor {
            query: "limit=5".into(),
            at_ms: 17,
            id: "abc".into(),
        };
        assert_eq!(Cursor::decode(&cursor.encode(), "limit=5").unwrap(), cursor);
        let other = Cursor::decode(&cursor.encode(), "limit=6").unwrap_err();
        assert!(other.to_string().contains("another query"), "{other}");
        assert!(Cursor::decode("zz", "limit=5").is_err());
    }

    #[test]
    fn milliseconds_round_trip() {
        let t = from_unix_ms(1_700_000_000_123);
        assert_eq!(unix_ms(t), 1_700_000_000_123);
    }
}

/// One JSON object: `result`'s fields and `inputs_from`, where the stress inputs came from
/// (`given` or `calibration`, per input); the answer of boundary and comparison.
#[derive(Debug, Serialize)]
pub struct WithOrigins<'a, T: Serialize> {
    /// The figures.
    #[serde(flatten)]
    pub result: &'a T,
    /// Where `fringe_value_n_per_mm` and `thickness_mm` came from.
    pub inputs_from: isotint_core::stress::InputOrigins,
}
