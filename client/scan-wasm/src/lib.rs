//! WebAssembly bindings of `cairn-scan`, built twice by `cargo xtask wasm`:
//!
//! - feature `parser` (default) → `cairn_scan.wasm`: `parse_scan(text, currentYear)`;
//! - feature `camera` only → `cairn_camera.wasm`: `decode_frame(rgba, width, height)`,
//!   loaded lazily when the camera opens so the app shell stays small.
//!
//! Results cross to JavaScript as plain objects (built from the same serde output the CLI
//! prints as JSON).

use wasm_bindgen::prelude::*;

/// Parses scanned text; returns the result object or throws an `Error` whose extra
/// properties `position`, `field` and `problem` say where and why.
#[cfg(feature = "parser")]
#[wasm_bindgen(js_name = parseScan)]
pub fn parse_scan(text: &str, current_year: u16) -> Result<JsValue, JsValue> {
    match cairn_scan::parse(text, current_year) {
        Ok(scanned) => to_js(&scanned),
        Err(err) => {
            let error = js_sys::Error::new(&err.message());
            let obj: &JsValue = error.as_ref();
            js_sys::Reflect::set(obj, &"position".into(), &(err.position as f64).into())?;
            js_sys::Reflect::set(obj, &"field".into(), &to_js(&err.field)?)?;
            js_sys::Reflect::set(obj, &"problem".into(), &to_js(&err.problem)?)?;
            Err(error.into())
        }
    }
}

/// Encodes a bin label from its parts; returns `{text, check, …}` or throws like
/// [`parse_scan`].
#[cfg(feature = "parser")]
#[wasm_bindgen(js_name = encodeBinLabel)]
pub fn encode_bin_label(
    site: &str,
    zone: &str,
    aisle: &str,
    bay: &str,
    level: &str,
) -> Result<JsValue, JsValue> {
    cairn_scan::BinLabel::encode(site, zone, aisle, bay, level)
        .map_err(|e| JsValue::from(js_sys::Error::new(&e.message())))
        .and_then(|label| to_js(&label))
}

/// Decodes the first barcode in an RGBA frame (e.g. `ImageData.data`); returns
/// `{text, format}` (text with its AIM symbology identifier, ready for `parseScan`) or
/// `null`.
#[cfg(feature = "camera")]
#[wasm_bindgen(js_name = decodeFrame)]
pub fn decode_frame(rgba: &[u8], width: u32, height: u32) -> Result<JsValue, JsValue> {
    match cairn_scan::camera::decode_frame(rgba, width, height) {
        Some(decoded) => to_js(&decoded),
        None => Ok(JsValue::NULL),
    }
}

fn to_js<T: serde::Serialize>(value: &T) -> Result<JsValue, JsValue> {
    let json = serde_json::to_string(value).map_err(|e| JsValue::from(e.to_string()))?;
    js_sys::JSON::parse(&json)
}
