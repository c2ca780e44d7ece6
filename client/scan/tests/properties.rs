//! Property tests: built element strings parse back to the same elements; no input panics.

use cairn_scan::{BinLabel, Element, element, parse};
use proptest::prelude::*;

const YEAR: u16 = 2024;

fn with_check(body: String) -> String {
    let c = cairn_scan::gtin_check_digit(&body).expect("digits");
    format!("{body}{c}")
}

fn cset82() -> impl Strategy<Value = String> {
    // GS1 character set 82, without '(' so the bracketed form stays unambiguous.
    "[!\"%&')*+,\\-./0-9:;<=>?A-Z_a-z]{1,20}"
}

fn yymmdd() -> impl Strategy<Value = String> {
    (0u8..100, 1u8..13, 0u8..29).prop_map(|(y, m, d)| format!("{y:02}{m:02}{d:02}"))
}

fn element_strategy() -> impl Strategy<Value = Element> {
    prop_oneof![
        "[0-9]{13}".prop_map(|b| Element::new("01", with_check(b))),
        "[0-9]{17}".prop_map(|b| Element::new("00", with_check(b))),
        "[0-9]{13}".prop_map(|b| Element::new("02", with_check(b))),
        cset82().prop_map(|v| Element::new("10", v)),
        cset82().prop_map(|v| Element::new("21", v)),
        yymmdd().prop_map(|v| Element::new("17", v)),
        yymmdd().prop_map(|v| Element::new("11", v)),
        yymmdd().prop_map(|v| Element::new("15", v)),
        "[0-9]{1,8}".prop_map(|v| Element::new("30", v)),
        "[0-9]{1,8}".prop_map(|v| Element::new("37", v)),
        (0u8..6, "[0-9]{6}").prop_map(|(n, v)| Element::new(format!("310{n}"), v)),
        (0u8..10, "[0-9]{1,15}").prop_map(|(n, v)| Element::new(format!("392{n}"), v)),
    ]
}

proptest! {
    #[test]
    fn built_element_strings_parse_back_to_the_same_elements(
        elements in prop::collection::vec(element_strategy(), 1..8)
    ) {
        let raw = element::to_raw(&elements);
        let back = parse(&format!("]C1{raw}"), YEAR).expect("valid by construction");
        prop_assert_eq!(&back.elements, &elements);
        let bracketed = element::to_bracketed(&elements);
        let back = parse(&bracketed, YEAR).expect("valid by construction");
        prop_assert_eq!(&back.elements, &elements);
    }

    #[test]
    fn bin_labels_round_trip(
        parts in ("[0-9A-Z]{1,6}", "[0-9A-Z]{1,3}", "[0-9A-Z]{1,3}", "[0-9A-Z]{1,3}", "[0-9A-Z]{1,2}")
    ) {
        let label = BinLabel::encode(&parts.0, &parts.1, &parts.2, &parts.3, &parts.4).unwrap();
        prop_assert_eq!(BinLabel::parse(label.text()).unwrap(), label.clone());
        let modules = cairn_scan::code128::encode(label.text()).unwrap();
        prop_assert!(modules.first() == Some(&true) && modules.last() == Some(&true));
    }

    #[test]
    fn arbitrary_text_never_panics(s in "\\PC{0,200}", year in any::<u16>()) {
        let _ = parse(&s, year);
    }

    #[test]
    fn arbitrary_gs1_like_text_never_panics(
        s in "(\\]C1|\\]d2|\\]E0|\\(|https://x/01/)?[0-9()\u{1d}A-Za-z%/?=&é]{0,80}",
        year in any::<u16>()
    ) {
        let _ = parse(&s, year);
    }

    #[test]
    fn arbitrary_bytes_never_panic(bytes in prop::collection::vec(any::<u8>(), 0..300)) {
        let s = String::from_utf8_lossy(&bytes);
        let _ = parse(&s, YEAR);
        let _ = BinLabel::parse(&s);
        let _ = cairn_scan::code128::encode(&s);
    }
}
