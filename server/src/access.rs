//! Who may do what: the access mode of a service, the roles of tokens, token names and the
//! tokens themselves (random, shown once, stored only as their SHA-256).

use std::fmt;
use std::net::{IpAddr, SocketAddr};
use std::str::FromStr;

use isotint_core::{CoreError, CoreResult};
use serde::{Deserialize, Serialize};

use crate::domain::shorten;
use crate::storage::calibrations::sha256_hex;
use crate::storage::Backend;

/// Whether a service asks for tokens.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum AccessMode {
    /// Every request is let in (the single-user default: SQLite on loopback).
    Open,
    /// Every API request but the health check needs `Authorization: Bearer TOKEN`.
    Tokens,
}

impl AccessMode {
    /// Name as the start-up log spells it.
    pub fn name(self) -> &'static str {
        match self {
            AccessMode::Open => "open",
            AccessMode::Tokens => "tokens",
        }
    }

    /// The mode of a service listening on `bind` with a `backend` database, and why: the
    /// `requested` mode when one was set, otherwise tokens whenever the service listens beyond
    /// loopback or uses PostgreSQL (a database replicas share), open otherwise.
    pub fn resolve(
        requested: Option<AccessMode>,
        bind: SocketAddr,
        backend: Backend,
    ) -> (AccessMode, &'static str) {
        match requested {
            Some(mode) => (mode, "set by --auth"),
            None if !bind.ip().is_loopback() => {
                (AccessMode::Tokens, "the service listens beyond loopback")
            }
            None if backend == Backend::Postgres => (
                AccessMode::Tokens,
                "the database is PostgreSQL, which several replicas may share",
            ),
            None => (
                AccessMode::Open,
                "SQLite on loopback: a single user's service",
            ),
        }
    }
}

/// What a token may do. Each role may do everything the one before it may: a reader reads
/// calibrations and makes and reads order maps, a writer also creates, corrects and imports
/// calibrations, an admin also archives and restores them and reads the audit trail.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Role {
    /// Reads calibrations, makes and reads order maps.
    Reader,
    /// Also creates, corrects and imports calibrations.
    Writer,
    /// Also archives and restores calibrations and reads the audit trail.
    Admin,
}

impl Role {
    /// Every role, least privileged first.
    pub const ALL: [Role; 3] = [Role::Reader, Role::Writer, Role::Admin];

    /// Name as stored and as typed on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Role::Reader => "reader",
            Role::Writer => "writer",
            Role::Admin => "admin",
        }
    }
}

impl fmt::Display for Role {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for Role {
    type Err = CoreError;

    fn from_str(text: &str) -> CoreResult<Role> {
        Role::ALL
            .into_iter()
            .find(|r| r.name() == text.trim())
            .ok_or_else(|| {
                CoreError::invalid(
                    "role",
                    format!(
                        "{:?} is not a role; expected reader, writer or admin",
                        shorten(text, 40)
                    ),
                )
            })
    }
}

/// Longest token name, characters.
pub const MAX_TOKEN_NAME_CHARS: usize = 64;

/// The name of a token: 1–64 ASCII letters, digits, `.`, `_` or `-` (so it never reads as one
/// of the audit trail's other actors, which contain spaces).
#[derive(Debug, Clone, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(try_from = "String", into = "String")]
pub struct TokenName(String);

impl TryFrom<String> for TokenName {
    type Error = CoreError;

    fn try_from(text: String) -> CoreResult<TokenName> {
        text.parse()
    }
}

impl From<TokenName> for String {
    fn from(name: TokenName) -> String {
        name.0
    }
}

impl TokenName {
    /// The name as text.
    pub fn as_str(&self) -> &str {
        &self.0
    }
}

impl fmt::Display for TokenName {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.0)
    }
}

impl FromStr for TokenName {
    type Err = CoreError;

    fn from_str(text: &str) -> CoreResult<TokenName> {
        let allowed = |c: char| c.is_ascii_alphanumeric() || matches!(c, '.' | '_' | '-');
        if text.is_empty() || text.len() > MAX_TOKEN_NAME_CHARS || !text.chars().all(allowed) {
            return Err(CoreError::invalid(
                "name",
                format!(
                    "{:?} is not a token name: use 1–{MAX_TOKEN_NAME_CHARS} letters, digits, \
                     '.', '_' or '-'",
                    shorten(text, 70)
                ),
            ));
        }
        Ok(TokenName(text.to_string()))
    }
}

/// Who made a change, as the audit trail records it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Actor {
    /// A request with this token.
    Token(TokenName),
    /// A request to a service in open mode (no token asked).
    OpenMode,
    /// `isotint token …` on the database itself.
    CommandLine,
    /// The service importing its calibration sets at start.
    ServiceStart,
}

impl Actor {
    /// The text the audit trail stores: the token's name, or words with a space (which no
    /// token name has).
    pub fn text(&self) -> &str {
        match self {
            Actor::Token(name) => name.as_str(),
            Actor::OpenMode => "open mode",
            Actor::CommandLine => "command line",
            Actor::ServiceStart => "service start",
        }
    }
}

/// Who made a change and from which address.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Origin {
    /// Who.
    pub actor: Actor,
    /// The client's IP address, for a change made over HTTP.
    pub address: Option<IpAddr>,
}

impl Origin {
    /// A change made on this machine without HTTP (command line, service start).
    pub fn local(actor: Actor) -> Origin {
        Origin {
            actor,
            address: None,
        }
    }
}

/// Start of every token, so that a token is recognised where it should not be (a log, a
/// repository).
const TOKEN_PREFIX: &str = "isotint_";

/// Random bytes in a token: 256 bits.
const TOKEN_BYTES: usize = 32;

/// A bearer token: [`TOKEN_PREFIX`] and 256 random bits in hex. `Debug` never shows it.
pub struct Token(String);

impl Token {
    /// A fresh token from the operating system's random source.
    pub fn generate() -> Result<Token, getrandom::Error> {
        let mut bytes = [0u8; TOKEN_BYTES];
        getrandom::fill(&mut bytes)?;
        Ok(Token(format!("{TOKEN_PREFIX}{}", hex::encode(bytes))))
    }

    /// The token in `text` if it has a token's shape (prefix and 64 lowercase hex digits).
    pub fn parse(text: &str) -> Option<Token> {
        let digits = text.strip_prefix(TOKEN_PREFIX)?;
        let shaped = digits.len() == 2 * TOKEN_BYTES
            && digits
                .bytes()
                .all(|b| b.is_ascii_digit() || (b'a'..=b'f').contains(&b));
        shaped.then(|| Token(text.to_string()))
    }

    /// The token itself, to show once to whoever made it.
    pub fn reveal(&self) -> &str {
        &self.0
    }

    /// SHA-256 (hex) of the token: what the database keeps and looks tokens up by. Looking a
    /// token up by the hash of 256 random bits leaks nothing through timing: an attacker
    /// timing the index learns about hashes, not about any token.
    pub fn sha256(&self) -> String {
        sha256_hex(self.0.as_bytes())
    }
}

impl fmt::Debug for Token {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("Token(…)")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_generated_token_has_256_random_bits_and_parses_back() {
        let (a, b) = (Token::generate().unwrap(), Token::generate().unwrap());
        assert_ne!(a.reveal(), b.reveal());
        assert_eq!(a.reveal().len(), TOKEN_PREFIX.len() + 64);
        let parsed = Token::parse(a.reveal()).unwrap();
        assert_eq!(parsed.sha256(), a.sha256());
        assert!(!format!("{a:?}").contains(&a.reveal()[TOKEN_PREFIX.len()..]));
    }

    #[test]
    fn text_without_a_tokens_shape_is_no_token() {
        for text in ["", "isotint_", "isotint_abc", "bearer", &"A".repeat(72)] {
            assert!(Token::parse(text).is_none(), "{text:?}");
        }
    }

    #[test]
    fn roles_are_ordered_by_what_they_may_do_and_parse_by_name() {
        assert!(Role::Reader < Role::Writer && Role::Writer < Role::Admin);
        for role in Role::ALL {
            assert_eq!(role.name().parse::<Role>().unwrap(), role);
        }
        let err = "root".parse::<Role>().unwrap_err().to_string();
        assert!(
            err.contains("role") && err.contains("reader, writer or admin"),
            "{err}"
        );
    }

    #[test]
    fn token_names_are_short_and_free_of_spaces() {
        assert!("lab-reader.2".parse::<TokenName>().is_ok());
        for bad in ["", "open mode", "ä", &"x".repeat(65)] {
            let err = bad.parse::<TokenName>().unwrap_err().to_string();
            assert!(err.contains("name"), "{bad:?}: {err}");
        }
    }

    #[test]
    fn sqlite_on_loopback_is_open_and_anything_shared_asks_for_tokens() {
        let loopback: SocketAddr = "127.0.0.1:8080".parse().unwrap();
        let lan: SocketAddr = "0.0.0.0:8080".parse().unwrap();
        let v6_loopback: SocketAddr = "[::1]:8080".parse().unwrap();
        let mode = |requested, bind, backend| AccessMode::resolve(requested, bind, backend).0;
        assert_eq!(mode(None, loopback, Backend::Sqlite), AccessMode::Open);
        assert_eq!(mode(None, v6_loopback, Backend::Sqlite), AccessMode::Open);
        assert_eq!(mode(None, lan, Backend::Sqlite), AccessMode::Tokens);
        assert_eq!(mode(None, loopback, Backend::Postgres), AccessMode::Tokens);
        let explicit_open = Some(AccessMode::Open);
        assert_eq!(
            mode(explicit_open, lan, Backend::Postgres),
            AccessMode::Open
        );
        let explicit_tokens = Some(AccessMode::Tokens);
        assert_eq!(
            mode(explicit_tokens, loopback, Backend::Sqlite),
            AccessMode::Tokens
        );
    }
}
