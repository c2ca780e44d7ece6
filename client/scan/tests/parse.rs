//! End-to-end behaviour of `parse`, on examples from the GS1 General Specifications and the
//! GS1 Digital Link standard (cited per case), plus invalid inputs that must be refused.

use cairn_scan::{BinLabel, Problem, Scan, Syntax, parse};

const YEAR: u16 = 2024;

fn item(raw: &str) -> (String, cairn_scan::Details) {
    match parse(raw, YEAR)
        .unwrap_or_else(|e| panic!("{raw:?}: {e}"))
        .scan
    {
        Scan::Item { gtin, details } => (gtin.to_string(), details),
        other => panic!("{raw:?} is not an item: {other:?}"),
    }
}

#[test]
fn plain_gtins_of_every_length_become_gtin_14() {
    // GTIN-13 5012345678900, GTIN-12 036000291452 (UPC-A), GTIN-8 96385074 and
    // GTIN-14 15012345678907: GS1 General Specifications examples (from memory); all check
    // digits confirmed with python-stdnum ean.is_valid.
    assert_eq!(item("5012345678900").0, "05012345678900");
    assert_eq!(item("036000291452").0, "00036000291452");
    assert_eq!(item("96385074").0, "00000096385074");
    assert_eq!(item("15012345678907").0, "15012345678907");
    assert_eq!(item("]E05012345678900").0, "05012345678900");
    assert_eq!(item("]E496385074").0, "00000096385074");
    assert_eq!(item("]I115012345678907").0, "15012345678907");
}

#[test]
fn upc_e_is_expanded_when_it_is_not_a_valid_ean_8() {
    // UPC-E 01234565 ↔ UPC-A 012345000065 (from memory); 01234505 ↔ 012000003455 by the
    // zero-suppression rule. python-stdnum ean.is_valid: both UPC-A are valid, 01234565 is
    // also a valid EAN-8 and 01234505 is not.
    assert_eq!(parse("01234505", YEAR).unwrap().syntax, Syntax::UpcE);
    assert_eq!(item("01234505").0, "00012000003455");
    assert_eq!(parse("01234565", YEAR).unwrap().syntax, Syntax::Gtin);
    assert_eq!(item("]E001234565").0, "00012345000065");
}

#[test]
fn sscc_alone_and_in_ai_00_is_a_pallet() {
    // SSCC 106141411234567897: GS1 General Specifications example (from memory);
    // check digit confirmed with python-stdnum ean.calc_check_digit.
    for raw in [
        "106141411234567897",
        "00106141411234567897",
        "]C100106141411234567897",
    ] {
        match parse(raw, YEAR).unwrap().scan {
            Scan::Pallet { sscc, .. } => assert_eq!(sscc.as_str(), "106141411234567897"),
            other => panic!("{raw}: {other:?}"),
        }
    }
}

#[test]
fn gs1_128_with_separators_gives_typed_fields_and_elements_in_order() {
    // Shape of the GS1 General Specifications §7.8 examples (from memory): GTIN, expiry
    // with day 00, lot, count, net weight 310n.
    let raw = "]C1010952012345678817250200\u{1d}10ABC-1\u{1d}30123\u{1d}3102001250";
    let s = parse(raw, YEAR).unwrap();
    let pairs: Vec<_> = s
        .elements
        .iter()
        .map(|e| (e.ai.as_str(), e.value.as_str()))
        .collect();
    // The 17 value needs no separator after it, but one there is tolerated.
    assert_eq!(
        pairs,
        [
            ("01", "09520123456788"),
            ("17", "250200"),
            ("10", "ABC-1"),
            ("30", "123"),
            ("3102", "001250")
        ]
    );
    let (gtin, d) = item(raw);
    assert_eq!(gtin, "09520123456788");
    assert_eq!(d.expiry.unwrap().to_string(), "2025-02-28");
    assert_eq!(d.lot.as_deref(), Some("ABC-1"));
    assert_eq!(d.count, Some(123));
    assert_eq!(d.net_weight_kg.unwrap().to_string(), "12.50");
    let json = serde_json::to_value(&s).unwrap();
    assert_eq!(json["scan"]["kind"], "item");
    assert_eq!(json["scan"]["expiry"], "2025-02-28");
    assert_eq!(json["elements"][1]["ai"], "17");
}

#[test]
fn wedge_scanners_without_identifiers_still_send_gs1_data() {
    let (_, d) = item("0109520123456788\u{1d}10LOT7\u{1d}21SN1");
    assert_eq!(d.serial.as_deref(), Some("SN1"));
    let (_, d) = item("010952012345678817261231");
    assert_eq!(d.expiry.unwrap().to_string(), "2026-12-31");
}

#[test]
fn bracketed_form_reads_like_the_raw_form() {
    let (gtin, d) = item("(01)09520123456788(15)261100(3922)1999");
    assert_eq!(gtin, "09520123456788");
    assert_eq!(d.best_before.unwrap().to_string(), "2026-11-30");
    assert_eq!(
        d.price.unwrap().to_string(),
        "19.99",
        "3922: price with two decimals"
    );
    let err = parse("(01)09520123456788(392)1999", YEAR).unwrap_err();
    assert_eq!(
        err.to_string(),
        "unknown AI (392)",
        "392 needs its decimal digit"
    );
}

#[test]
fn digital_link_uris_are_items() {
    // GS1 Digital Link standard 1.x example (from memory).
    let raw =
        "https://id.gs1.org/01/09520123456788/22/2A/10/ABC%2F123/21/12345?17=270101&3103=000189";
    let s = parse(raw, YEAR).unwrap();
    assert_eq!(s.syntax, Syntax::DigitalLink);
    let (_, d) = item(raw);
    assert_eq!(d.lot.as_deref(), Some("ABC/123"));
    assert_eq!(d.serial.as_deref(), Some("12345"));
    assert_eq!(d.expiry.unwrap().to_string(), "2027-01-01");
    assert_eq!(d.net_weight_kg.unwrap().to_string(), "0.189");
    let ais: Vec<_> = s.elements.iter().map(|e| e.ai.as_str()).collect();
    assert_eq!(ais, ["01", "22", "10", "21", "17", "3103"]);
    // Inside a QR symbol the scanner prefixes ]Q1; an ordinary web address is just text.
    assert_eq!(
        parse(&format!("]Q1{raw}"), YEAR).unwrap().syntax,
        Syntax::DigitalLink
    );
    assert!(matches!(
        parse("https://example.com/help", YEAR).unwrap().scan,
        Scan::Unknown { .. }
    ));
}

#[test]
fn bin_labels_are_bins_and_a_bad_check_is_refused() {
    let label = BinLabel::encode("WH1", "B", "07", "22", "4").unwrap();
    let s = parse(&format!("]C0{}\r\n", label.text()), YEAR).unwrap();
    assert_eq!(s.scan, Scan::Bin { bin: label.clone() });
    let json = serde_json::to_value(&s).unwrap();
    assert_eq!(json["scan"]["bin"]["bay"], "22");
    let mut bad = label.text().to_owned();
    bad.replace_range(13..14, "3"); // bay 22 → 23
    let err = parse(&bad, YEAR).unwrap_err();
    assert!(matches!(err.problem, Problem::CheckDigit { .. }), "{err}");
}

#[test]
fn invalid_gs1_data_is_refused_precisely() {
    let cases = [
        (
            "0109520123456784",
            "AI (01): check digit should be 8, found 4",
            15,
        ),
        ("]C1010952012345678817251301", "AI (17): month 13", 21),
        (
            "]C1010952012345678817250230",
            "AI (17): day 30 does not exist in 2025-02",
            21,
        ),
        (
            "]C10109520123456788101234567890123456789012",
            "AI (10) longer than 20 characters",
            21,
        ),
        ("(995)1", "unknown AI (995)", 1),
        (
            "5012345678901",
            "GTIN-13: check digit should be 0, found 1",
            12,
        ),
        ("]C1", "nothing was scanned", 3),
        ("", "nothing was scanned", 0),
        (
            "]C10109520123456788\u{1d}\u{1d}10A",
            "scan: separator (GS) where a value was expected",
            20,
        ),
        ("]d2(01)09520123456788", "scan: expected an AI (digits)", 3),
        (
            "]C13107001500",
            "AI (3107): decimal position 7 is out of range for this AI",
            6,
        ),
    ];
    for (raw, message, position) in cases {
        let err = parse(raw, YEAR).expect_err(raw);
        assert_eq!(err.to_string(), message, "{raw:?}");
        assert_eq!(err.position, position, "{raw:?}");
    }
}

#[test]
fn anything_else_is_unknown_text() {
    for raw in ["hello", "12345", "]C0ABC", "]A0CODE39"] {
        assert!(
            matches!(parse(raw, YEAR).unwrap().scan, Scan::Unknown { .. }),
            "{raw}"
        );
    }
}

#[test]
fn errors_serialise_with_message_fields() {
    let err = parse("0109520123456784", YEAR).unwrap_err();
    let json = serde_json::to_value(&err).unwrap();
    assert_eq!(json["position"], 15);
    assert_eq!(json["field"]["kind"], "ai");
    assert_eq!(json["field"]["name"], "01");
    assert_eq!(json["problem"]["kind"], "check_digit");
}
