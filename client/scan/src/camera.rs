//! Camera-frame decoding (feature `camera`): RGBA pixels in, barcode text out, for browsers
//! without a native barcode detector. Only the formats Cairn uses are tried.

use std::collections::HashSet;

use rxing::common::HybridBinarizer;
use rxing::{
    BarcodeFormat, BinaryBitmap, DecodeHints, Luma8LuminanceSource, MultiFormatReader,
    RXingResultMetadataType, RXingResultMetadataValue, Reader,
};
use serde::Serialize;

/// Largest frame accepted, in pixels (a 4K frame); bigger ones are refused, not decoded.
pub const MAX_FRAME_PIXELS: usize = 3840 * 2160;

/// A barcode read from a frame.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Decoded {
    /// The data with its AIM symbology identifier in front (`]C1…`, `]E0…`, `]Q1…`),
    /// exactly as a hardware scanner with identifiers on would send it: give it to
    /// [`crate::parse`].
    pub text: String,
    /// Which symbology was read.
    pub format: Format,
}

/// The symbologies the camera reads.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Format {
    Ean13,
    Ean8,
    UpcA,
    UpcE,
    Code128,
    Itf,
    DataMatrix,
    QrCode,
}

/// Decodes the first barcode found in an RGBA frame, or `None` if there is none (or the
/// buffer does not match `width` × `height` × 4).
pub fn decode_frame(rgba: &[u8], width: u32, height: u32) -> Option<Decoded> {
    let pixels = (width as usize).checked_mul(height as usize)?;
    if pixels == 0 || pixels > MAX_FRAME_PIXELS || rgba.len() != pixels.checked_mul(4)? {
        return None;
    }
    // Rec. 601 luma in integer arithmetic; alpha is ignored.
    let luma: Vec<u8> = rgba
        .chunks_exact(4)
        .map(|p| ((77 * u32::from(p[0]) + 150 * u32::from(p[1]) + 29 * u32::from(p[2])) >> 8) as u8)
        .collect();
    decode_luma(luma, width, height)
}

/// Decodes the first barcode in an 8-bit greyscale frame (one byte per pixel).
pub fn decode_luma(luma: Vec<u8>, width: u32, height: u32) -> Option<Decoded> {
    let source = Luma8LuminanceSource::new(luma, width, height).ok()?;
    let mut bitmap = BinaryBitmap::new(HybridBinarizer::new(source));
    let mut reader = MultiFormatReader::default();
    let result = reader.decode_with_hints(&mut bitmap, &hints()).ok()?;
    let format = match result.getBarcodeFormat() {
        BarcodeFormat::EAN_13 => Format::Ean13,
        BarcodeFormat::EAN_8 => Format::Ean8,
        BarcodeFormat::UPC_A => Format::UpcA,
        BarcodeFormat::UPC_E => Format::UpcE,
        BarcodeFormat::CODE_128 => Format::Code128,
        BarcodeFormat::ITF => Format::Itf,
        BarcodeFormat::DATA_MATRIX => Format::DataMatrix,
        BarcodeFormat::QR_CODE => Format::QrCode,
        _ => return None,
    };
    let data = result.getText();
    // With AssumeGs1, GS1-128 already comes back as "]C1…" with GS separators.
    let text = if data.starts_with("]C1") {
        data.to_owned()
    } else {
        let id = match result
            .getRXingResultMetadata()
            .get(&RXingResultMetadataType::SYMBOLOGY_IDENTIFIER)
        {
            Some(RXingResultMetadataValue::SymbologyIdentifier(id)) => id.clone(),
            _ => String::new(),
        };
        format!("{id}{data}")
    };
    Some(Decoded { text, format })
}

fn hints() -> DecodeHints {
    let formats: HashSet<BarcodeFormat> = [
        BarcodeFormat::EAN_13,
        BarcodeFormat::EAN_8,
        BarcodeFormat::UPC_A,
        BarcodeFormat::UPC_E,
        BarcodeFormat::CODE_128,
        BarcodeFormat::ITF,
        BarcodeFormat::DATA_MATRIX,
        BarcodeFormat::QR_CODE,
    ]
    .into_iter()
    .collect();
    DecodeHints {
        PossibleFormats: Some(formats),
        TryHarder: Some(true),
        AssumeGs1: Some(true),
        ..DecodeHints::default()
    }
}
