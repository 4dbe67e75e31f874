//! The journal in IndexedDB: one object store per book (the lab's own, the demo's),
//! entries as JSON text keyed by their number. Appends run in one transaction opened
//! with `durability: "strict"`, so "saved" means written to disk; `add` refuses a number
//! that is taken, so two tabs can never write the same entry number: the later one
//! learns it must first take in the other's entries.

use js_sys::{Array, Function, Object, Promise, Reflect};
use wasm_bindgen::prelude::*;
use wasm_bindgen::JsCast;
use wasm_bindgen_futures::JsFuture;
use web_sys::{IdbDatabase, IdbKeyRange, IdbRequest, IdbTransaction};

use super::StoreError;
use crate::journal::Entry;

const DB_NAME: &str = "cuvette";
const DB_VERSION: u32 = 1;
/// Object store names, one per book.
pub const BOOKS: [&str; 2] = ["lab", "demo"];

/// Why an append did not happen.
#[derive(Debug, Clone, PartialEq)]
pub enum AppendError {
    /// Another tab wrote these entry numbers first: take its entries in, then retry.
    Taken,
    /// The browser refused (full, disabled, closed).
    Refused(String),
}

fn failed(what: &str, e: JsValue) -> StoreError {
    let detail = e
        .dyn_ref::<web_sys::DomException>()
        .map(|d| format!("{}: {}", d.name(), d.message()))
        .or_else(|| e.as_string())
        .unwrap_or_default();
    StoreError(format!("IndexedDB {what} failed ({detail})"))
}

/// Wait for a request's success (its result) or error.
async fn request(req: &IdbRequest) -> Result<JsValue, JsValue> {
    let req2 = req.clone();
    let promise = Promise::new(&mut |resolve: Function, reject: Function| {
        let done = req2.clone();
        let ok = Closure::once_into_js(move |_: web_sys::Event| {
            let _ = resolve.call1(&JsValue::NULL, &done.result().unwrap_or(JsValue::UNDEFINED));
        });
        let bad = req2.clone();
        let err = Closure::once_into_js(move |_: web_sys::Event| {
            let why = bad
                .error()
                .ok()
                .flatten()
                .map_or(JsValue::from_str("error"), JsValue::from);
            let _ = reject.call1(&JsValue::NULL, &why);
        });
        req2.set_onsuccess(Some(ok.unchecked_ref()));
        req2.set_onerror(Some(err.unchecked_ref()));
    });
    JsFuture::from(promise).await
}

/// Wait for a transaction to commit (`complete`), or its abort or error.
async fn committed(tx: &IdbTransaction) -> Result<(), JsValue> {
    let tx2 = tx.clone();
    let promise = Promise::new(&mut |resolve: Function, reject: Function| {
        let ok = Closure::once_into_js(move |_: web_sys::Event| {
            let _ = resolve.call0(&JsValue::NULL);
        });
        let t = tx2.clone();
        let reject2 = reject.clone();
        let t2 = tx2.clone();
        let err = Closure::once_into_js(move |_: web_sys::Event| {
            let why = t.error().map_or(JsValue::from_str("error"), JsValue::from);
            let _ = reject.call1(&JsValue::NULL, &why);
        });
        let abort = Closure::once_into_js(move |_: web_sys::Event| {
            let why = t2
                .error()
                .map_or(JsValue::from_str("AbortError"), JsValue::from);
            let _ = reject2.call1(&JsValue::NULL, &why);
        });
        tx2.set_oncomplete(Some(ok.unchecked_ref()));
        tx2.set_onerror(Some(err.unchecked_ref()));
        tx2.set_onabort(Some(abort.unchecked_ref()));
    });
    JsFuture::from(promise).await.map(|_| ())
}

/// The open database.
#[derive(Clone)]
pub struct Db(IdbDatabase);

impl Db {
    /// Open (and on first use create) the database.
    pub async fn open() -> Result<Db, StoreError> {
        let factory = web_sys::window()
            .and_then(|w| w.indexed_db().ok().flatten())
            .ok_or_else(|| {
                StoreError("IndexedDB is not available in this browser window".into())
            })?;
        let open = factory
            .open_with_u32(DB_NAME, DB_VERSION)
            .map_err(|e| failed("open", e))?;
        let on_upgrade = Closure::once_into_js({
            let open = open.clone();
            move |_: web_sys::IdbVersionChangeEvent| {
                if let Ok(db) = open.result().and_then(|r| r.dyn_into::<IdbDatabase>()) {
                    let names = db.object_store_names();
                    for book in BOOKS {
                        if !names.contains(book) {
                            let _ = db.create_object_store(book);
                        }
                    }
                }
            }
        });
        open.set_onupgradeneeded(Some(on_upgrade.unchecked_ref()));
        let db = request(&open)
            .await
            .map_err(|e| failed("open", e))?
            .dyn_into::<IdbDatabase>()
            .map_err(|e| failed("open", e))?;
        Ok(Db(db))
    }

    fn transaction(&self, book: &str, write: bool) -> Result<IdbTransaction, JsValue> {
        if !write {
            return self.0.transaction_with_str(book);
        }
        // transaction(store, "readwrite", { durability: "strict" }); the options
        // argument is not yet in web-sys's stable bindings, so call it by name.
        let options = Object::new();
        Reflect::set(&options, &"durability".into(), &"strict".into())?;
        let f: Function = Reflect::get(&self.0, &"transaction".into())?.dyn_into()?;
        f.call3(&self.0, &book.into(), &"readwrite".into(), &options)?
            .dyn_into()
    }

    /// Every entry numbered `from` or later, in order. Entries that do not parse are
    /// returned as their number and text, to be reported.
    pub async fn read(
        &self,
        book: &str,
        from: u64,
    ) -> Result<(Vec<Entry>, Vec<(u64, String)>), StoreError> {
        let tx = self
            .transaction(book, false)
            .map_err(|e| failed("read", e))?;
        let store = tx.object_store(book).map_err(|e| failed("read", e))?;
        let range = IdbKeyRange::lower_bound(&JsValue::from_f64(from as f64))
            .map_err(|e| failed("read", e))?;
        let keys = request(
            &store
                .get_all_keys_with_key(&range)
                .map_err(|e| failed("read", e))?,
        )
        .await
        .map_err(|e| failed("read", e))?;
        let values = request(
            &store
                .get_all_with_key(&range)
                .map_err(|e| failed("read", e))?,
        )
        .await
        .map_err(|e| failed("read", e))?;
        let keys: Array = keys.unchecked_into();
        let values: Array = values.unchecked_into();
        let mut entries = Vec::with_capacity(values.length() as usize);
        let mut unreadable = Vec::new();
        for (k, v) in keys.iter().zip(values.iter()) {
            let seq = k.as_f64().unwrap_or(0.0) as u64;
            let text = v.as_string().unwrap_or_default();
            match serde_json::from_str::<Entry>(&text) {
                Ok(e) => entries.push(e),
                Err(_) => unreadable.push((seq, text)),
            }
        }
        Ok((entries, unreadable))
    }

    /// Append entries in one strict-durability transaction; all or none.
    pub async fn append(&self, book: &str, entries: &[Entry]) -> Result<(), AppendError> {
        let refused = |e: JsValue| {
            let taken = e
                .dyn_ref::<web_sys::DomException>()
                .is_some_and(|d| d.name() == "ConstraintError");
            if taken {
                AppendError::Taken
            } else {
                AppendError::Refused(failed("save", e).0)
            }
        };
        let tx = self.transaction(book, true).map_err(refused)?;
        let store = tx.object_store(book).map_err(refused)?;
        for e in entries {
            let text = serde_json::to_string(e).map_err(|x| AppendError::Refused(x.to_string()))?;
            store
                .add_with_key(&JsValue::from_str(&text), &JsValue::from_f64(e.seq as f64))
                .map_err(refused)?;
        }
        committed(&tx).await.map_err(refused)
    }

    /// Replace the whole journal of `book` by `entries`, in one transaction (an archive
    /// removed records): either all of it is written or nothing changes.
    pub async fn replace_all(&self, book: &str, entries: &[Entry]) -> Result<(), StoreError> {
        let fail = |e: JsValue| failed("rewrite", e);
        let tx = self.transaction(book, true).map_err(fail)?;
        let store = tx.object_store(book).map_err(fail)?;
        store.clear().map_err(fail)?;
        for e in entries {
            let text = serde_json::to_string(e).map_err(|x| StoreError(x.to_string()))?;
            store
                .add_with_key(&JsValue::from_str(&text), &JsValue::from_f64(e.seq as f64))
                .map_err(fail)?;
        }
        committed(&tx).await.map_err(fail)
    }

    /// Write entries another copy has and this one lacks (a repair); numbers already
    /// taken are left as they are.
    pub async fn put_missing(&self, book: &str, entries: &[Entry]) -> Result<(), StoreError> {
        match self.append(book, entries).await {
            Ok(()) => Ok(()),
            Err(AppendError::Taken) => Ok(()),
            Err(AppendError::Refused(e)) => Err(StoreError(e)),
        }
    }

    /// Remove every entry of a book (the demo switched off).
    pub async fn clear(&self, book: &str) -> Result<(), StoreError> {
        let tx = self
            .transaction(book, true)
            .map_err(|e| failed("clear", e))?;
        let store = tx.object_store(book).map_err(|e| failed("clear", e))?;
        store.clear().map_err(|e| failed("clear", e))?;
        committed(&tx).await.map_err(|e| failed("clear", e))
    }
}
