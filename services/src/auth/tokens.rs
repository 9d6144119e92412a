//! Token secrets: how they are made, and the hash under which the store keeps them.
//!
//! A secret is `blt1_` followed by 32 random bytes from the operating system's generator,
//! base64url without padding (256 bits: guessing is hopeless, so a fast hash is the right one
//! to store). The store keeps SHA-256 of the whole secret, never the secret; a presented
//! secret is hashed and looked up. A token also has an identifier (`tok_` and 16 hex digits,
//! random, unrelated to the secret) for listing and revoking.

use base64::Engine as _;
use rand::RngCore;
use sha2::{Digest, Sha256};

/// Prefix of every secret this server makes (lets secret scanners recognise leaked ones).
pub const SECRET_PREFIX: &str = "blt1_";

/// SHA-256 of a presented secret, as stored.
pub fn hash_secret(secret: &str) -> [u8; 32] {
    Sha256::digest(secret.as_bytes()).into()
}

/// A new random secret.
pub fn new_secret() -> String {
    let mut bytes = [0u8; 32];
    rand::rngs::OsRng.fill_bytes(&mut bytes);
    format!("{SECRET_PREFIX}{}", base64::engine::general_purpose::URL_SAFE_NO_PAD.encode(bytes))
}

/// A new random token identifier.
pub fn new_token_id() -> String {
    let mut bytes = [0u8; 8];
    rand::rngs::OsRng.fill_bytes(&mut bytes);
    format!("tok_{}", bytes.iter().map(|b| format!("{b:02x}")).collect::<String>())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sha256_matches_the_published_test_vector() {
        // FIPS 180-2, Appendix B.1: SHA-256("abc").
        let expected = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad";
        let got: String = hash_secret("abc").iter().map(|b| format!("{b:02x}")).collect();
        assert_eq!(got, expected);
    }

    #[test]
    fn secrets_and_ids_are_fresh_and_well_formed() {
        let (a, b) = (new_secret(), new_secret());
        assert_ne!(a, b);
        assert!(a.starts_with(SECRET_PREFIX) && a.len() == SECRET_PREFIX.len() + 43, "{a}");
        assert!(a.bytes().all(|c| c.is_ascii_alphanumeric() || c == b'_' || c == b'-'));
        let id = new_token_id();
        assert!(id.starts_with("tok_") && id.len() == 20 && id != new_token_id());
    }
}
