//! API key tokens: how they are made and how they are stored (only as SHA-256).
//!
//! A token is `kn_` followed by 64 lowercase hex digits (256 random bits from the
//! operating system). Because tokens carry that much entropy, a single SHA-256 is a
//! sufficient one-way hash (a slow password hash protects low-entropy secrets, which
//! these are not; common practice).

use sha2::{Digest, Sha256};
use uuid::Uuid;

use crate::model::{ApiKey, Scope, now_utc};

/// Prefix of every token.
pub const TOKEN_PREFIX: &str = "kn_";

/// Characters of the token kept (in clear) to recognise a key.
const SHOWN: usize = 10;

/// Lowercase hex of `bytes`.
pub fn hex(bytes: &[u8]) -> String {
    use std::fmt::Write;
    let mut s = String::with_capacity(bytes.len() * 2);
    for b in bytes {
        let _ = write!(s, "{b:02x}");
    }
    s
}

/// SHA-256 of `token`, lowercase hex: what the database keeps.
pub fn token_hash(token: &str) -> String {
    hex(&Sha256::digest(token.as_bytes()))
}

/// A new token and the key record that stores its hash.
///
/// Errors: the operating system's random source failed.
pub fn new_key(
    label: &str,
    scope: Scope,
    structures: Option<Vec<String>>,
) -> Result<(String, ApiKey), getrandom::Error> {
    let mut raw = [0u8; 32];
    getrandom::fill(&mut raw)?;
    let token = format!("{TOKEN_PREFIX}{}", hex(&raw));
    let key = ApiKey {
        id: Uuid::new_v4(),
        label: label.to_owned(),
        prefix: token.chars().take(SHOWN).collect(),
        scope,
        structures,
        created_at: now_utc(),
        revoked_at: None,
        token_sha256: token_hash(&token),
    };
    Ok((token, key))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_matches_the_fips_180_example() {
        // FIPS 180-2, appendix B.1: SHA-256("abc").
        assert_eq!(
            token_hash("abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }

    #[test]
    fn new_tokens_are_distinct_and_only_their_hash_is_kept() {
        let (t1, k1) = new_key("a", Scope::Read, None).expect("must succeed");
        let (t2, k2) = new_key("b", Scope::Admin, None).expect("must succeed");
        assert_ne!(t1, t2);
        assert!(t1.starts_with(TOKEN_PREFIX) && t1.len() == 3 + 64);
        assert_eq!(k1.token_sha256, token_hash(&t1));
        assert_ne!(k1.token_sha256, k2.token_sha256);
        assert!(t1.starts_with(&k1.prefix));
        assert!(
            !serde_json::to_string(&k1)
                .expect("must succeed")
                .contains(&k1.token_sha256)
        );
    }
}
