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
