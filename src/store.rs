//! Browser storage: the lab and the technician's settings in `localStorage`.
//!
//! Every key starts with `cuvette.` because all `file://` pages share one origin.
//! This is the only module that touches storage; it calls no engine code.

use gloo_storage::{LocalStorage, Storage};

use crate::lab::Lab;

/// Prefix of every key Cuvette writes.
pub const PREFIX: &str = "cuvette.";
const LAB_KEY: &str = "cuvette.lab";
const TECHNICIAN_KEY: &str = "cuvette.technician";
const VIEW_KEY: &str = "cuvette.view";

/// What went wrong reading or writing the browser's storage, in words for the user.
#[derive(Debug, Clone, PartialEq)]
pub struct StoreError(pub String);

impl std::fmt::Display for StoreError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

/// The saved lab, `Ok(None)` when nothing is saved yet. A saved lab that no longer
/// parses is reported, never overwritten silently.
pub fn load_lab() -> Result<Option<Lab>, StoreError> {
    let Some(text) = raw(LAB_KEY) else {
        return Ok(None);
    };
    Lab::from_json(&text).map(Some).map_err(|e| {
        StoreError(format!(
            "the saved lab could not be read ({e}). Nothing was changed; export it from \
             Records before starting a new lab"
        ))
    })
}

/// Save the whole lab.
pub fn save_lab(lab: &Lab) -> Result<(), StoreError> {
    let text = serde_json::to_string(lab)
        .map_err(|e| StoreError(format!("the lab could not be encoded: {e}")))?;
    LocalStorage::raw().set_item(LAB_KEY, &text).map_err(|_| {
        StoreError(
            "the browser refused to save (storage full or disabled). Export your records to \
             a file now so nothing is lost"
                .into(),
        )
    })
}

/// Forget the saved lab (after the user confirmed).
pub fn clear_lab() {
    LocalStorage::delete(LAB_KEY);
}

pub fn technician() -> String {
    raw(TECHNICIAN_KEY).unwrap_or_default()
}

pub fn set_technician(initials: &str) -> Result<(), StoreError> {
    set_raw(TECHNICIAN_KEY, initials)
}

pub fn view() -> Option<String> {
    raw(VIEW_KEY)
}

pub fn set_view(view: &str) -> Result<(), StoreError> {
    set_raw(VIEW_KEY, view)
}

fn raw(key: &str) -> Option<String> {
    LocalStorage::raw().get_item(key).ok().flatten()
}

fn set_raw(key: &str, value: &str) -> Result<(), StoreError> {
    debug_assert!(key.starts_with(PREFIX));
    LocalStorage::raw()
        .set_item(key, value)
        .map_err(|_| StoreError("the browser refused to save this setting".into()))
}

/// 16 random bytes from the browser's cryptographic generator, for record ids.
pub fn random_bytes() -> [u8; 16] {
    let mut bytes = [0u8; 16];
    if let Some(crypto) = web_sys::window().and_then(|w| w.crypto().ok()) {
        let _ = crypto.get_random_values_with_u8_array(&mut bytes);
    }
    bytes
}

/// Offer `text` as a file download named `filename` (the browser's usual save dialog
/// or downloads folder; from there to the USB stick).
pub fn download(filename: &str, mime: &str, text: &str) -> Result<(), StoreError> {
    let fail = |what: &str| {
        StoreError(format!(
            "the file could not be offered for download ({what})"
        ))
    };
    let window = web_sys::window().ok_or_else(|| fail("no window"))?;
    let document = window.document().ok_or_else(|| fail("no document"))?;
    let parts = js_sys::Array::of1(&wasm_bindgen::JsValue::from_str(text));
    let options = web_sys::BlobPropertyBag::new();
    options.set_type(mime);
    let blob = web_sys::Blob::new_with_str_sequence_and_options(&parts, &options)
        .map_err(|_| fail("blob"))?;
    let url = web_sys::Url::create_object_url_with_blob(&blob).map_err(|_| fail("url"))?;
    let anchor: web_sys::HtmlAnchorElement =
        wasm_bindgen::JsCast::dyn_into(document.create_element("a").map_err(|_| fail("link"))?)
            .map_err(|_| fail("link"))?;
    anchor.set_href(&url);
    anchor.set_download(filename);
    anchor.click();
    let _ = web_sys::Url::revoke_object_url(&url);
    Ok(())
}

/// The text of a file the user picked.
pub async fn read_text(file: web_sys::File) -> Result<String, StoreError> {
    let promise = file.text();
    wasm_bindgen_futures::JsFuture::from(promise)
        .await
        .ok()
        .and_then(|v| v.as_string())
        .ok_or_else(|| StoreError(format!("{} could not be read as text", file.name())))
}
