//! Our Code 128 bars, rendered to pixels, read back by an independent general-purpose
//! decoder (the rxing crate, a port of the ZXing reader).

use std::collections::HashSet;

use cairn_scan::{BinLabel, code128};
use proptest::prelude::*;
use rxing::common::HybridBinarizer;
use rxing::{
    BarcodeFormat, BinaryBitmap, DecodeHints, Luma8LuminanceSource, MultiFormatReader, Reader,
};

const PX_PER_MODULE: usize = 3;
const HEIGHT: usize = 40;

fn read_back(text: &str) -> Option<String> {
    let modules = code128::encode(text).ok()?;
    let quiet = code128::QUIET_ZONE_MODULES;
    let width = (modules.len() + 2 * quiet) * PX_PER_MODULE;
    let mut row = vec![255u8; width];
    for (i, &bar) in modules.iter().enumerate() {
        if bar {
            let x = (quiet + i) * PX_PER_MODULE;
            row[x..x + PX_PER_MODULE].fill(0);
        }
    }
    let pixels = row.repeat(HEIGHT);
    let source = Luma8LuminanceSource::new(pixels, width as u32, HEIGHT as u32).ok()?;
    let mut bitmap = BinaryBitmap::new(HybridBinarizer::new(source));
    let hints = DecodeHints {
        PossibleFormats: Some(HashSet::from([BarcodeFormat::CODE_128])),
        PureBarcode: Some(true),
        ..DecodeHints::default()
    };
    let result = MultiFormatReader::default()
        .decode_with_hints(&mut bitmap, &hints)
        .ok()?;
    Some(result.getText().to_owned())
}

#[test]
fn bin_labels_and_mixed_texts_read_back() {
    let label = BinLabel::encode("WH1", "A", "03", "12", "2").expect("valid");
    for text in [
        label.text(),
        "CB1-S9-ZB-A17-104-3-*",
        "123456",
        "12345",
        "A1234567B",
        "X123456789012Y",
        " ~{}|",
    ] {
        assert_eq!(read_back(text).as_deref(), Some(text), "{text:?}");
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(64))]
    #[test]
    fn any_printable_ascii_reads_back(text in "[ -~]{1,30}") {
        prop_assert_eq!(read_back(&text), Some(text.clone()));
    }
}
