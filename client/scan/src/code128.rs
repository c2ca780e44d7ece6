//! Code 128 bar patterns (sets B and C) for printing bin labels, with the modulo-103
//! symbol check character. Pure code, so the server needs no barcode library.

use thiserror::Error;

/// Longest text encoded, in characters (a bin label is under 30).
pub const MAX_TEXT_LEN: usize = 80;

/// Quiet zone each side of the symbol, in modules (ISO/IEC 15417 asks for at least 10).
pub const QUIET_ZONE_MODULES: usize = 10;

/// Bar/space widths of symbol values 0..=105, then the stop pattern (ISO/IEC 15417 table,
/// from memory; checked by decoding with independent readers in the tests).
const PATTERNS: [&str; 107] = [
    "212222", "222122", "222221", "121223", "121322", "131222", "122213", "122312", "132212",
    "221213", "221312", "231212", "112232", "122132", "122231", "113222", "123122", "123221",
    "223211", "221132", "221231", "213212", "223112", "312131", "311222", "321122", "321221",
    "312212", "322112", "322211", "212123", "212321", "232121", "111323", "131123", "131321",
    "112313", "132113", "132311", "211313", "231113", "231311", "112133", "112331", "132131",
    "113123", "113321", "133121", "313121", "211331", "231131", "213113", "213311", "213131",
    "311123", "311321", "331121", "312113", "312311", "332111", "314111", "221411", "431111",
    "111224", "111422", "121124", "121421", "141122", "141221", "112214", "112412", "122114",
    "122411", "142112", "142211", "241211", "221114", "413111", "241112", "134111", "111242",
    "121142", "121241", "114212", "124112", "124211", "411212", "421112", "421211", "212141",
    "214121", "412121", "111143", "111341", "131141", "114113", "114311", "411113", "411311",
    "113141", "114131", "311141", "411131", "211412", "211214", "211232", "2331112",
];

const CODE_C: u8 = 99;
const CODE_B: u8 = 100;
const START_B: u8 = 104;
const START_C: u8 = 105;
const STOP: usize = 106;

/// Why a text cannot be encoded.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum Code128Error {
    #[error("nothing to encode")]
    Empty,
    #[error("text longer than {MAX_TEXT_LEN} characters")]
    TooLong,
    #[error("character {0:?} is not printable ASCII")]
    Character(char),
}

/// Returns the symbol values (start, data, check; no stop) for `text`, using set C for
/// runs of digits where that is shorter and set B otherwise.
pub fn symbol_values(text: &str) -> Result<Vec<u8>, Code128Error> {
    if text.is_empty() {
        return Err(Code128Error::Empty);
    }
    if text.chars().count() > MAX_TEXT_LEN {
        return Err(Code128Error::TooLong);
    }
    if let Some(c) = text.chars().find(|c| !(' '..='~').contains(c)) {
        return Err(Code128Error::Character(c));
    }
    let b = text.as_bytes();
    let digits_from = |i: usize| b[i..].iter().take_while(|c| c.is_ascii_digit()).count();
    let mut values = Vec::with_capacity(b.len() + 4);
    let mut in_c;
    let mut i = 0;
    let run = digits_from(0);
    if run == b.len() && run % 2 == 0 || run >= 4 {
        values.push(START_C);
        in_c = true;
    } else {
        values.push(START_B);
        in_c = false;
    }
    while i < b.len() {
        let run = digits_from(i);
        if in_c {
            if run >= 2 {
                values.push((b[i] - b'0') * 10 + (b[i + 1] - b'0'));
                i += 2;
                continue;
            }
            values.push(CODE_B);
            in_c = false;
        }
        // In set B: switch to C for a long digit run (or one that ends the text), after
        // sending an odd leading digit in B.
        let worth_it = run >= 6 || (run >= 4 && i + run == b.len());
        if worth_it && run % 2 == 1 {
            values.push(b[i] - 32);
            i += 1;
        }
        if worth_it {
            values.push(CODE_C);
            in_c = true;
            continue;
        }
        values.push(b[i] - 32);
        i += 1;
    }
    let sum: u32 = values
        .iter()
        .enumerate()
        .map(|(pos, &v)| u32::from(v) * (pos.max(1) as u32))
        .sum();
    values.push((sum % 103) as u8);
    Ok(values)
}

/// Returns the modules of the symbol for `text` (true = bar), without quiet zones.
pub fn encode(text: &str) -> Result<Vec<bool>, Code128Error> {
    let values = symbol_values(text)?;
    let mut modules = Vec::with_capacity(values.len() * 11 + 13);
    let patterns = values
        .iter()
        .map(|&v| PATTERNS[usize::from(v)])
        .chain([PATTERNS[STOP]]);
    for pattern in patterns {
        for (k, w) in pattern.bytes().enumerate() {
            let bar = k % 2 == 0;
            modules.extend(std::iter::repeat_n(bar, usize::from(w - b'0')));
        }
    }
    Ok(modules)
}

/// Returns the modules as a string of `1` (bar) and `0` (space), for tests and debugging.
pub fn to_bit_string(modules: &[bool]) -> String {
    modules.iter().map(|&m| if m { '1' } else { '0' }).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_pattern_is_eleven_modules_wide() {
        for (v, p) in PATTERNS.iter().enumerate() {
            let width: u32 = p.bytes().map(|w| u32::from(w - b'0')).sum();
            assert_eq!(width, if v == STOP { 13 } else { 11 }, "value {v}");
        }
    }

    #[test]
    fn check_character_matches_the_worked_example() {
        // Hand computation of the ISO/IEC 15417 modulo-103 rule for "PJJ123C" in set B:
        // 104 + 48·1 + 42·2 + 42·3 + 17·4 + 18·5 + 19·6 + 35·7 = 879 ≡ 55 (mod 103).
        let v = symbol_values("PJJ123C").unwrap();
        assert_eq!(v.first(), Some(&START_B));
        assert_eq!(v.last(), Some(&55));
    }

    #[test]
    fn digit_runs_use_set_c() {
        assert_eq!(symbol_values("123456").unwrap()[..4], [START_C, 12, 34, 56]);
        let v = symbol_values("CB1-WH1-A-031234").unwrap();
        assert!(v.contains(&CODE_C), "{v:?}");
        assert_eq!(symbol_values("12345").unwrap()[0], START_C);
    }

    #[test]
    fn non_ascii_and_empty_are_refused() {
        assert_eq!(symbol_values(""), Err(Code128Error::Empty));
        assert_eq!(symbol_values("é"), Err(Code128Error::Character('é')));
        assert_eq!(symbol_values("\n"), Err(Code128Error::Character('\n')));
    }
}
