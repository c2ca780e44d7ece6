//! The camera decoder on images made by independent encoders (python-barcode, segno,
//! pylibdmtx; degraded variants rotated, blurred and noised with Pillow/numpy), listed in
//! tests/fixtures/images/manifest.json by tests/xcheck/make_fixtures.py.
#![cfg(feature = "camera")]

use cairn_scan::camera::decode_frame;
use serde_json::Value;

fn rgba(file: &str) -> (Vec<u8>, u32, u32) {
    let path = format!(
        "{}/tests/fixtures/images/{file}",
        env!("CARGO_MANIFEST_DIR")
    );
    let img = image::open(&path).unwrap_or_else(|e| panic!("{path}: {e}"));
    let rgba = img.to_rgba8();
    let (w, h) = rgba.dimensions();
    (rgba.into_raw(), w, h)
}

#[test]
fn every_fixture_image_decodes_to_its_text_and_format() {
    let manifest: Value =
        serde_json::from_str(include_str!("fixtures/images/manifest.json")).expect("JSON");
    let (_, cases) = manifest
        .as_object()
        .expect("object")
        .iter()
        .find(|(k, _)| k.starts_with("images"))
        .expect("images section");
    let cases = cases.as_array().expect("array");
    assert_eq!(cases.len(), 14, "7 formats, clean and degraded");
    let mut failures = Vec::new();
    for case in cases {
        let file = case["file"].as_str().expect("file");
        let (pixels, w, h) = rgba(file);
        match decode_frame(&pixels, w, h) {
            Some(d) => {
                let format = serde_json::to_value(d.format).expect("serialises");
                let text = d.text.split_at(3).1; // drop the symbology identifier
                let want = case["text"].as_str().expect("text");
                let want = want.strip_prefix("]C1").map_or(want, |w| w);
                if text != want || format != case["format"] {
                    failures.push(format!("{file}: got {:?} as {format}", d.text));
                }
            }
            None => failures.push(format!("{file}: nothing decoded")),
        }
    }
    assert!(failures.is_empty(), "{failures:#?}");
}

#[test]
fn gs1_128_comes_back_with_its_identifier_and_parses() {
    // python-barcode's gs1_128 writes FNC1 first; the reader reports ]C1.
    let (pixels, w, h) = rgba("gs1_128.png");
    let d = decode_frame(&pixels, w, h).expect("decodes");
    assert!(d.text.starts_with("]C1"), "{:?}", d.text);
    let scanned = cairn_scan::parse(&d.text, 2024).expect("valid GS1");
    assert_eq!(scanned.elements.len(), 3);
}

#[test]
fn wrong_sizes_and_blank_frames_give_nothing() {
    assert_eq!(decode_frame(&[0; 16], 3, 3), None);
    assert_eq!(decode_frame(&[], 0, 0), None);
    assert_eq!(decode_frame(&[255; 64 * 64 * 4], 64, 64), None);
    assert_eq!(decode_frame(&[0; 4], u32::MAX, u32::MAX), None);
}
