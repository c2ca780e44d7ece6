//! Check characters: the GS1 modulo-10 digit and ISO/IEC 7064 MOD 37-2.

/// Characters of ISO/IEC 7064 MOD 37-2, in value order; the last one (`*`) only ever
/// appears as a check character.
pub const MOD37_2_ALPHABET: &[u8; 37] = b"0123456789ABCDEFGHIJKLMNOPQRSTUVWXYZ*";

/// Computes the GS1 modulo-10 check digit for the digits before it (GTIN, SSCC, GLN).
///
/// Weights 3 and 1 alternate from the rightmost digit of `body`. Returns `None` when
/// `body` is empty or holds anything other than ASCII digits.
pub fn gtin_check_digit(body: &str) -> Option<u8> {
    if body.is_empty() || !body.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    let sum: u32 = body
        .bytes()
        .rev()
        .enumerate()
        .map(|(i, b)| u32::from(b - b'0') * if i % 2 == 0 { 3 } else { 1 })
        .sum();
    // `sum % 10` is below 10, so the digit fits a u8.
    Some(((10 - sum % 10) % 10) as u8)
}

/// Computes the ISO/IEC 7064 MOD 37-2 check character for `body` (digits and A–Z).
///
/// Returns `None` when `body` is empty or holds a character outside `0-9A-Z`.
pub fn mod37_2_check(body: &str) -> Option<char> {
    if body.is_empty() {
        return None;
    }
    let mut p: u32 = 0;
    for b in body.bytes() {
        let v = mod37_value(b).filter(|&v| v < 36)?;
        p = (p * 2 + v) % 37;
    }
    // The check c satisfies 2p + c ≡ 1 (mod 37).
    let c = (1 + 2 * 37 - 2 * p) % 37;
    Some(char::from(MOD37_2_ALPHABET[c as usize]))
}

fn mod37_value(b: u8) -> Option<u32> {
    MOD37_2_ALPHABET
        .iter()
        .position(|&a| a == b)
        .map(|i| i as u32)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gs1_check_digits_match_published_keys() {
        // GS1 General Specifications, example GTIN-13 5012345678900 and the
        // GS1 Digital Link standard's example GTIN 09520123456788 (from memory).
        assert_eq!(gtin_check_digit("501234567890"), Some(0));
        assert_eq!(gtin_check_digit("0952012345678"), Some(8));
        // GS1 General Specifications SSCC example 106141411234567897 (from memory).
        assert_eq!(gtin_check_digit("10614141123456789"), Some(7));
    }

    #[test]
    fn gtin_check_digit_refuses_non_digits() {
        assert_eq!(gtin_check_digit(""), None);
        assert_eq!(gtin_check_digit("12a4"), None);
    }

    #[test]
    fn mod37_2_matches_the_standard_example() {
        // ISO/IEC 7064 MOD 37-2 worked example "G123489654321" → "Y" (from memory;
        // also cross-checked against python-stdnum in tests/reference.rs).
        assert_eq!(mod37_2_check("G123489654321"), Some('Y'));
        assert_eq!(mod37_2_check("a1"), None);
        assert_eq!(mod37_2_check(""), None);
    }
}
