//! Page sizes and opaque page tokens shared by the listing RPCs.

use crate::error::{ServiceError, ServiceResult};

/// Page size when the request gives 0.
pub const DEFAULT_PAGE_SIZE: usize = 100;
/// Largest page size served.
pub const MAX_PAGE_SIZE: usize = 1000;

/// The effective page size of a request.
pub fn page_size(requested: u32) -> usize {
    match requested as usize {
        0 => DEFAULT_PAGE_SIZE,
        n => n.min(MAX_PAGE_SIZE),
    }
}

/// Encodes token parts as lowercase hex of `part1 0x1f part2 ...`: opaque to clients, and
/// safe in URLs and logs.
pub fn encode_token(parts: &[&str]) -> String {
    parts.join("\u{1f}").bytes().map(|b| format!("{b:02x}")).collect()
}

/// Decodes a token made by [`encode_token`] into exactly `expected` parts.
pub fn decode_token(token: &str, expected: usize) -> ServiceResult<Vec<String>> {
    let bad = || ServiceError::invalid("page_token", "is not a token this server issued");
    if !token.len().is_multiple_of(2) {
        return Err(bad());
    }
    let bytes = (0..token.len())
        .step_by(2)
        .map(|i| token.get(i..i + 2).and_then(|h| u8::from_str_radix(h, 16).ok()))
        .collect::<Option<Vec<u8>>>()
        .ok_or_else(bad)?;
    let text = String::from_utf8(bytes).map_err(|_| bad())?;
    let parts: Vec<String> = text.split('\u{1f}').map(str::to_owned).collect();
    if parts.len() != expected {
        return Err(bad());
    }
    Ok(parts)
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    proptest! {
        #[test]
        fn tokens_round_trip(a in "[^\u{1f}]{0,20}", b in "[^\u{1f}]{0,20}") {
            let token = encode_token(&[&a, &b]);
            prop_assert_eq!(decode_token(&token, 2).unwrap(), vec![a, b]);
        }
    }

    #[test]
    fn garbage_tokens_are_refused() {
        assert!(decode_token("zz", 1).is_err());
        assert!(decode_token("abc", 1).is_err());
        assert!(decode_token(&encode_token(&["a"]), 2).is_err());
    }
}
