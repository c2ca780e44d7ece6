//! Codes that name things in a site: each is parsed once at the edge into a
//! newtype, so the rest of the code never handles a raw string as a code.

use serde::Serialize;
use std::fmt;

/// Why a code was refused.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{what} '{text}': {rule}")]
pub struct CodeError {
    pub what: &'static str,
    pub text: String,
    pub rule: &'static str,
}

macro_rules! code_type {
    ($(#[$doc:meta])* $name:ident, $what:literal, $max:literal, $allowed:expr, $rule:literal) => {
        $(#[$doc])*
        #[derive(Debug, Clone, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
        #[serde(transparent)]
        pub struct $name(String);

        impl $name {
            /// Parses the code: trims spaces, refuses empty, over-long or odd characters.
            pub fn parse(text: &str) -> Result<Self, CodeError> {
                let t = text.trim();
                let err = |rule| CodeError { what: $what, text: text.to_string(), rule };
                if t.is_empty() {
                    return Err(err("must not be empty"));
                }
                if t.chars().count() > $max {
                    return Err(err(concat!("longer than ", stringify!($max), " characters")));
                }
                let allowed: fn(char) -> bool = $allowed;
                if !t.chars().all(allowed) {
                    return Err(err($rule));
                }
                Ok(Self(t.to_string()))
            }

            /// Returns the code as text.
            pub fn as_str(&self) -> &str {
                &self.0
            }
        }

        impl fmt::Display for $name {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str(&self.0)
            }
        }

        impl utoipa::PartialSchema for $name {
            fn schema() -> utoipa::openapi::RefOr<utoipa::openapi::schema::Schema> {
                utoipa::openapi::schema::ObjectBuilder::new()
                    .schema_type(utoipa::openapi::schema::Type::String)
                    .max_length(Some($max))
                    .description(Some(concat!("A ", $what, ": 1 to ", stringify!($max),
                        " characters; ", $rule, ".")))
                    .into()
            }
        }

        impl utoipa::ToSchema for $name {}
    };
}

fn upper_alnum_dash(c: char) -> bool {
    c.is_ascii_uppercase() || c.is_ascii_digit() || c == '-'
}

fn upper_alnum(c: char) -> bool {
    c.is_ascii_uppercase() || c.is_ascii_digit()
}

fn code_char(c: char) -> bool {
    c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.' | '/')
}

code_type!(
    /// A site's short code, e.g. `KLN`.
    SiteCode, "site code", 6, upper_alnum,
    "use capital letters and digits (it is printed on bin labels)"
);
code_type!(
    /// A zone's code within a site, e.g. `A`.
    ZoneCode, "zone code", 3, upper_alnum,
    "use capital letters and digits (it is printed on bin labels)"
);
code_type!(
    /// A bin's code within a site, e.g. `A-03-12-2`.
    BinCode, "bin code", 32, upper_alnum_dash,
    "use capital letters, digits and '-'"
);
code_type!(
    /// A stock-keeping unit code.
    Sku, "SKU", 40, code_char,
    "use letters, digits and - _ . /"
);
code_type!(
    /// A lot (batch) code as printed on the goods.
    LotCode, "lot", 20, code_char,
    "use letters, digits and - _ . /"
);
code_type!(
    /// The sender's id for a movement; a resend with the same id is harmless.
    MovementUid, "movement id", 64, code_char,
    "use letters, digits and - _ . /"
);

impl BinCode {
    /// Builds the canonical code of a bin from its place: `ZONE-AA-BB-L`.
    pub fn from_place(zone: &ZoneCode, aisle: u16, bay: u16, level: u8) -> Self {
        Self(format!("{zone}-{aisle:02}-{bay:02}-{level}"))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_are_trimmed_and_checked() {
        assert_eq!(Sku::parse("  HB-M8-40 ").unwrap().as_str(), "HB-M8-40");
        assert_eq!(Sku::parse("").unwrap_err().rule, "must not be empty");
        assert!(SiteCode::parse("kln").is_err());
        assert!(BinCode::parse("A 01").is_err());
        assert!(LotCode::parse("123456789012345678901").is_err());
    }

    #[test]
    fn a_bin_code_is_built_from_its_place() {
        let z = ZoneCode::parse("B").unwrap();
        assert_eq!(BinCode::from_place(&z, 3, 12, 2).as_str(), "B-03-12-2");
    }
}
