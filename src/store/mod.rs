//! Browser storage: the journal's two copies (IndexedDB, and the localStorage mirror),
//! the technician's settings, the start-up marker, and files in and out.
//!
//! Every localStorage key starts with `cuvette.` because all `file://` pages share one
//! origin. This module and its children are the only code that touches storage; the
//! journal's logic (`crate::journal`, `crate::mirror`) is plain Rust and tested natively.

pub mod idb;
pub mod shelf;

use gloo_storage::{LocalStorage, Storage};

use crate::mirror::{KeyValue, Refused};

/// Prefix of every key Cuvette writes.
pub const PREFIX: &str = "cuvette.";
/// The whole lab in one key, as Cuvette kept it before the journal (migrated at start).
pub const ONE_KEY_LAB: &str = "cuvette.lab";
const TECHNICIAN_KEY: &str = "cuvette.technician";
const VIEW_KEY: &str = "cuvette.view";
const CLOCK_KEY: &str = "cuvette.clock-last-seen";
const BOOK_KEY: &str = "cuvette.book";
const BOOT_KEY: &str = "cuvette.boot";
const ASIDE_KEY: &str = "cuvette.aside";
/// Per tab and book: changes on screen not yet committed to the journal.
const PENDING_KEY: &str = "cuvette.pending";

/// The quota Chromium gives all `file://` pages together, in characters of keys and
/// values (measured, see DEVELOPERS.md); other pages opened from files share it.
pub const LOCAL_QUOTA_CHARS: usize = 5_242_880;

/// What went wrong reading or writing the browser's storage, in words for the user.
#[derive(Debug, Clone, PartialEq)]
pub struct StoreError(pub String);

impl std::fmt::Display for StoreError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(&self.0)
    }
}

/// The two journals kept apart: the lab's own records, and the demo's.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Book {
    Lab,
    Demo,
}

impl Book {
    /// Key prefix of its localStorage mirror.
    pub fn prefix(self) -> &'static str {
        match self {
            Book::Lab => "cuvette.lab.",
            Book::Demo => "cuvette.demo.",
        }
    }

    /// Its IndexedDB object store.
    pub fn store_name(self) -> &'static str {
        match self {
            Book::Lab => idb::BOOKS[0],
            Book::Demo => idb::BOOKS[1],
        }
    }

    fn code(self) -> &'static str {
        self.store_name()
    }
}

/// The browser's localStorage as a [`KeyValue`].
pub struct Local;

impl KeyValue for Local {
    fn get(&self, key: &str) -> Option<String> {
        LocalStorage::raw().get_item(key).ok().flatten()
    }
    fn set(&mut self, key: &str, value: &str) -> Result<(), Refused> {
        debug_assert!(key.starts_with(PREFIX));
        LocalStorage::raw()
            .set_item(key, value)
            .map_err(|_| Refused)
    }
    fn remove(&mut self, key: &str) {
        let _ = LocalStorage::raw().remove_item(key);
    }
    fn keys(&self) -> Vec<String> {
        let s = LocalStorage::raw();
        let n = s.length().unwrap_or(0);
        (0..n).filter_map(|i| s.key(i).ok().flatten()).collect()
    }
}

/// Characters of localStorage in use by every page of this origin (all `file://` pages
/// share it), and by Cuvette's keys alone.
pub fn local_usage() -> (usize, usize) {
    let kv = Local;
    let mut all = 0;
    let mut ours = 0;
    for k in kv.keys() {
        let n = k.chars().count() + kv.get(&k).map_or(0, |v| v.chars().count());
        all += n;
        if k.starts_with(PREFIX) {
            ours += n;
        }
    }
    (all, ours)
}

/// The book shown at start (the demo is on only while the user keeps it on).
pub fn open_book() -> Book {
    if raw(BOOK_KEY).as_deref() == Some(Book::Demo.code()) {
        Book::Demo
    } else {
        Book::Lab
    }
}

pub fn set_open_book(book: Book) -> Result<(), StoreError> {
    set_raw(BOOK_KEY, book.code())
}

/// Entry numbers the user chose to leave out of a book (on the recovery screen).
pub fn set_aside(book: Book) -> Vec<u64> {
    raw(&format!("{ASIDE_KEY}.{}", book.code()))
        .and_then(|t| serde_json::from_str(&t).ok())
        .unwrap_or_default()
}

pub fn set_set_aside(book: Book, seqs: &[u64]) -> Result<(), StoreError> {
    set_raw(
        &format!("{ASIDE_KEY}.{}", book.code()),
        &serde_json::to_string(seqs).unwrap_or_default(),
    )
}

thread_local! {
    /// This tab's own name for its pending key (two tabs never share one).
    static TAB: String = random_bytes().iter().map(|b| format!("{b:02x}")).take(6).collect();
}

fn pending_prefix(book: Book) -> String {
    format!("{PENDING_KEY}.{}.", book.code())
}

/// Keep this tab's uncommitted entries of `book` in localStorage (written at once, so a
/// reload or a closed tab keeps them); an empty list removes the key. Best effort: when
/// the browser refuses, the save state already says "not saved".
pub fn write_pending(book: Book, entries: &[crate::journal::Entry]) {
    let key = TAB.with(|t| format!("{}{t}", pending_prefix(book)));
    let mut kv = Local;
    if entries.is_empty() {
        kv.remove(&key);
    } else if let Ok(text) = serde_json::to_string(entries) {
        let _ = kv.set(&key, &text);
    }
}

/// Take every pending list of `book` that a closed page left (any tab's), removing
/// the keys; the caller adopts the entries the journal does not already hold.
pub fn take_pending(book: Book) -> Vec<crate::journal::Entry> {
    let prefix = pending_prefix(book);
    let mut kv = Local;
    let mut out = Vec::new();
    for key in kv.keys().into_iter().filter(|k| k.starts_with(&prefix)) {
        if let Some(list) = kv
            .get(&key)
            .and_then(|t| serde_json::from_str::<Vec<crate::journal::Entry>>(&t).ok())
        {
            out.extend(list);
        }
        kv.remove(&key);
    }
    out
}

/// Mark a start as begun. Returns what went wrong last time if the previous start
/// never finished (a crash, a hang, a panic that was recorded).
pub fn begin_start() -> Option<String> {
    let previous = raw(BOOT_KEY);
    let _ = set_raw(BOOT_KEY, "starting");
    // A page closed or reloaded on purpose says goodbye; a killed or hung one cannot.
    if let Some(w) = web_sys::window() {
        let bye = wasm_bindgen::closure::Closure::<dyn Fn()>::new(|| {
            if raw(BOOT_KEY).as_deref() == Some("starting") {
                start_finished();
            }
        });
        let _ = w.add_event_listener_with_callback(
            "pagehide",
            wasm_bindgen::JsCast::unchecked_ref(bye.as_ref()),
        );
        bye.forget();
    }
    previous.map(|p| match p.strip_prefix("failed:") {
        Some(why) => why.to_string(),
        None => {
            "the last start did not finish (the page stopped or hung while opening the lab)".into()
        }
    })
}

/// The start finished: the lab is on screen and the page answers.
pub fn start_finished() {
    let _ = LocalStorage::raw().remove_item(BOOT_KEY);
}

/// Record a crash so the next start opens the recovery screen.
pub fn note_crash(message: &str) {
    let short: String = message.chars().take(500).collect();
    let _ = LocalStorage::raw().set_item(BOOT_KEY, &format!("failed:{short}"));
}

/// The lab as an older Cuvette kept it, in one key, if it is still there.
pub fn one_key_lab() -> Option<String> {
    raw(ONE_KEY_LAB)
}

/// Remove the one-key lab once the journal holds it.
pub fn forget_one_key_lab() {
    Local.remove(ONE_KEY_LAB);
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

/// When this browser last ran Cuvette (the clock as it read then).
pub fn clock_last_seen() -> Option<chrono::DateTime<chrono::Utc>> {
    raw(CLOCK_KEY).and_then(|s| s.parse().ok())
}

/// Remember the clock as it reads now (a full storage only loses the remark).
pub fn set_clock_last_seen(now: chrono::DateTime<chrono::Utc>) {
    let _ = set_raw(CLOCK_KEY, &now.to_rfc3339());
}

fn raw(key: &str) -> Option<String> {
    Local.get(key)
}

fn set_raw(key: &str, value: &str) -> Result<(), StoreError> {
    Local.set(key, value).map_err(|_| {
        StoreError(
            "the browser refused to save this setting (its storage is full or disabled)".into(),
        )
    })
}

/// Everything Cuvette has stored, as it is, in one JSON text: every `cuvette.` key of
/// localStorage and every entry of both IndexedDB journals (for the recovery screen's
/// download; nothing is interpreted).
pub async fn everything_stored() -> String {
    let kv = Local;
    let local: serde_json::Map<String, serde_json::Value> = kv
        .keys()
        .into_iter()
        .filter(|k| k.starts_with(PREFIX))
        .map(|k| {
            let v = kv.get(&k).unwrap_or_default();
            (k, serde_json::Value::String(v))
        })
        .collect();
    let mut journals = serde_json::Map::new();
    if let Ok(db) = idb::Db::open().await {
        for book in [Book::Lab, Book::Demo] {
            if let Ok((entries, unreadable)) = db.read(book.store_name(), 0).await {
                let mut list: Vec<serde_json::Value> = entries
                    .iter()
                    .filter_map(|e| serde_json::to_value(e).ok())
                    .collect();
                list.extend(
                    unreadable
                        .into_iter()
                        .map(|(_, t)| serde_json::Value::String(t)),
                );
                journals.insert(book.code().into(), serde_json::Value::Array(list));
            }
        }
    }
    serde_json::json!({
        "what": "everything Cuvette had stored in this browser, as it was",
        "local_storage": local,
        "indexeddb": journals,
    })
    .to_string()
}

/// A channel to the other tabs of Cuvette open in this browser.
pub struct Tabs(web_sys::BroadcastChannel);

impl Tabs {
    pub fn open(on_news: impl Fn(Book) + 'static) -> Option<Tabs> {
        let channel = web_sys::BroadcastChannel::new("cuvette").ok()?;
        let handler = wasm_bindgen::closure::Closure::<dyn Fn(web_sys::MessageEvent)>::new(
            move |ev: web_sys::MessageEvent| {
                let book = match ev.data().as_string().as_deref() {
                    Some("demo") => Book::Demo,
                    _ => Book::Lab,
                };
                on_news(book);
            },
        );
        channel.set_onmessage(Some(wasm_bindgen::JsCast::unchecked_ref(handler.as_ref())));
        handler.forget();
        Some(Tabs(channel))
    }

    /// Tell the other tabs that `book` has new entries.
    pub fn announce(&self, book: Book) {
        let _ = self.0.post_message(&book.code().into());
    }
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

/// Let the page draw and answer before the next slice of a long piece of work.
pub async fn next_task() {
    let promise = js_sys::Promise::new(&mut |resolve, _| {
        if let Some(w) = web_sys::window() {
            let _ = w.set_timeout_with_callback_and_timeout_and_arguments_0(&resolve, 0);
        }
    });
    let _ = wasm_bindgen_futures::JsFuture::from(promise).await;
}
