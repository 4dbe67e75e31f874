//! The journal's copy in localStorage: entries in chunks under many keys, and one
//! pointer key, written last, that names the chunks of the current generation.
//!
//! A chunk holds [`ENTRIES_PER_CHUNK`] entries as JSON lines, zlib-compressed (its
//! Adler-32 catches a changed byte) and packed 15 bits to a character, because the
//! browser counts localStorage in characters, not bytes. Full chunks never change; only
//! the last one is rewritten, under a new key. A save writes the new chunk, then
//! switches the pointer, then removes the chunk the pointer no longer names, so a crash
//! between two writes leaves the earlier generation whole. Keys no pointer names are
//! leftovers of such a crash and are swept at start-up.
//!
//! Plain Rust over [`KeyValue`]; `crate::store` gives it the browser's localStorage and
//! the tests an in-memory map.

use serde::{Deserialize, Serialize};

use crate::journal::Entry;

/// Entries per chunk: a full chunk is about 10 KB of JSON before compression.
pub const ENTRIES_PER_CHUNK: usize = 128;

/// The format written into every pointer; a newer one is refused, not misread.
pub const FORMAT: u32 = 1;

/// A key-value store of strings (localStorage, or a map in tests).
pub trait KeyValue {
    fn get(&self, key: &str) -> Option<String>;
    /// `Err` when the store refuses (full or disabled).
    fn set(&mut self, key: &str, value: &str) -> Result<(), Refused>;
    fn remove(&mut self, key: &str);
    fn keys(&self) -> Vec<String>;
}

/// The store refused a write.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Refused;

/// The pointer: which chunks make the journal now.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Pointer {
    pub format: u32,
    pub generation: u64,
    /// Number of entries.
    pub count: u64,
    /// Hash of the last entry (kept apart so the last entry is checked too).
    pub head: String,
    pub chunks: Vec<String>,
}

/// What was read back.
#[derive(Debug, Clone, Default)]
pub struct Read {
    pub pointer: Option<Pointer>,
    /// The entries of every readable chunk, in order, up to the first unreadable one.
    pub entries: Vec<Entry>,
    /// Chunks that could not be read, in words (names the key).
    pub problems: Vec<String>,
}

/// One journal's copy under a key prefix (`cuvette.lab.` or `cuvette.demo.`).
#[derive(Debug, Clone)]
pub struct Mirror {
    prefix: String,
}

impl Mirror {
    pub fn new(prefix: &str) -> Mirror {
        Mirror {
            prefix: prefix.to_string(),
        }
    }

    pub fn pointer_key(&self) -> String {
        format!("{}pointer", self.prefix)
    }

    fn chunk_key(&self, index: usize, generation: u64) -> String {
        format!("{}c{index}.g{generation}", self.prefix)
    }

    /// The pointer, if one is stored and readable.
    pub fn pointer(&self, kv: &dyn KeyValue) -> Result<Option<Pointer>, String> {
        let Some(text) = kv.get(&self.pointer_key()) else {
            return Ok(None);
        };
        let p: Pointer = serde_json::from_str(&text)
            .map_err(|e| format!("{} cannot be read ({e})", self.pointer_key()))?;
        if p.format > FORMAT {
            return Err(format!(
                "{} was written by a newer Cuvette (format {}): open the lab with that version",
                self.pointer_key(),
                p.format
            ));
        }
        Ok(Some(p))
    }

    /// Read the journal back, chunk by chunk.
    pub fn read(&self, kv: &dyn KeyValue) -> Read {
        let mut out = Read::default();
        let pointer = match self.pointer(kv) {
            Ok(p) => p,
            Err(e) => {
                out.problems.push(e);
                return out;
            }
        };
        if let Some(p) = &pointer {
            for key in &p.chunks {
                match kv
                    .get(key)
                    .ok_or_else(|| "it is missing".to_string())
                    .and_then(|t| decode_chunk(&t))
                {
                    Ok(entries) => out.entries.extend(entries),
                    Err(why) => {
                        out.problems
                            .push(format!("the stored chunk {key} cannot be read: {why}"));
                        break;
                    }
                }
            }
        }
        out.pointer = pointer;
        out
    }

    /// Check the `k`-th chunk the pointer names against the journal's `entries` (the
    /// ones it should hold, from IndexedDB). `Err` says what is wrong, in the words of
    /// the start-up report.
    pub fn check_chunk(
        &self,
        kv: &dyn KeyValue,
        pointer: &Pointer,
        k: usize,
        entries: &[Entry],
    ) -> Result<(), String> {
        let Some(key) = pointer.chunks.get(k) else {
            return Ok(());
        };
        let held = kv
            .get(key)
            .ok_or_else(|| "it is missing".to_string())
            .and_then(|t| decode_chunk(&t))
            .map_err(|why| format!("the stored chunk {key} cannot be read: {why}"))?;
        let from = (k * ENTRIES_PER_CHUNK).min(entries.len());
        let expected = &entries[from..(from + ENTRIES_PER_CHUNK).min(entries.len())];
        if held == expected {
            return Ok(());
        }
        let at = held
            .iter()
            .zip(expected)
            .position(|(a, b)| a != b)
            .unwrap_or(held.len().min(expected.len()));
        match expected.get(at).or(expected.last()) {
            Some(e) => Err(crate::journal::copy_differs_from(e)),
            None => Err(format!(
                "the stored chunk {key} holds entries the journal does not have"
            )),
        }
    }

    /// Write `entries` (the whole journal) as the next generation after `previous`:
    /// full chunks already stored are kept, the rest written under new keys, then the
    /// pointer, then the chunks no longer named are removed. On a refusal the earlier
    /// generation stays whole and what was written for the new one is removed.
    pub fn write(
        &self,
        kv: &mut dyn KeyValue,
        entries: &[Entry],
        previous: Option<&Pointer>,
    ) -> Result<Pointer, Refused> {
        let generation = previous.map_or(1, |p| p.generation + 1);
        let kept_full = previous.map_or(0, |p| {
            (p.count as usize / ENTRIES_PER_CHUNK)
                .min(p.chunks.len())
                .min(entries.len() / ENTRIES_PER_CHUNK)
        });
        let mut chunks: Vec<String> =
            previous.map_or(Vec::new(), |p| p.chunks[..kept_full].to_vec());
        let mut written = Vec::new();
        for (index, part) in entries
            .chunks(ENTRIES_PER_CHUNK)
            .enumerate()
            .skip(kept_full)
        {
            let key = self.chunk_key(index, generation);
            if kv.set(&key, &encode_chunk(part)).is_err() {
                written.iter().for_each(|k: &String| kv.remove(k));
                return Err(Refused);
            }
            written.push(key.clone());
            chunks.push(key);
        }
        let pointer = Pointer {
            format: FORMAT,
            generation,
            count: entries.len() as u64,
            head: entries.last().map_or(String::new(), |e| e.hash.clone()),
            chunks,
        };
        let text = serde_json::to_string(&pointer).map_err(|_| Refused)?;
        if kv.set(&self.pointer_key(), &text).is_err() {
            written.iter().for_each(|k| kv.remove(k));
            return Err(Refused);
        }
        if let Some(p) = previous {
            for old in &p.chunks {
                if !pointer.chunks.contains(old) {
                    kv.remove(old);
                }
            }
        }
        Ok(pointer)
    }

    /// Remove keys under this prefix that the pointer does not name (left by a crash
    /// between a chunk and the pointer). Returns how many.
    pub fn sweep(&self, kv: &mut dyn KeyValue) -> usize {
        let Ok(pointer) = self.pointer(kv) else {
            return 0; // an unreadable pointer: touch nothing
        };
        let named = pointer.map(|p| p.chunks).unwrap_or_default();
        let stale: Vec<String> = kv
            .keys()
            .into_iter()
            .filter(|k| {
                k.starts_with(&self.prefix) && *k != self.pointer_key() && !named.contains(k)
            })
            .collect();
        stale.iter().for_each(|k| kv.remove(k));
        stale.len()
    }

    /// Remove every key of this journal (the demo switched off).
    pub fn clear(&self, kv: &mut dyn KeyValue) {
        for k in kv.keys() {
            if k.starts_with(&self.prefix) {
                kv.remove(&k);
            }
        }
    }

    /// Characters used by this journal's keys and values.
    pub fn size(&self, kv: &dyn KeyValue) -> usize {
        kv.keys()
            .iter()
            .filter(|k| k.starts_with(&self.prefix))
            .map(|k| k.chars().count() + kv.get(k).map_or(0, |v| v.chars().count()))
            .sum()
    }
}

/// A chunk's text: entries as JSON lines, zlib, packed.
pub fn encode_chunk(entries: &[Entry]) -> String {
    let mut lines = String::new();
    for e in entries {
        if let Ok(line) = serde_json::to_string(e) {
            lines.push_str(&line);
            lines.push('\n');
        }
    }
    pack(&miniz_oxide::deflate::compress_to_vec_zlib(
        lines.as_bytes(),
        9,
    ))
}

/// The entries of a chunk's text, or why it cannot be read.
pub fn decode_chunk(text: &str) -> Result<Vec<Entry>, String> {
    let bytes = unpack(text)?;
    let raw = miniz_oxide::inflate::decompress_to_vec_zlib_with_limit(&bytes, 64 << 20)
        .map_err(|_| "its compressed data is damaged".to_string())?;
    let lines = std::str::from_utf8(&raw).map_err(|_| "it is not text".to_string())?;
    lines
        .lines()
        .enumerate()
        .map(|(k, l)| {
            serde_json::from_str(l).map_err(|e| format!("entry {} cannot be read ({e})", k + 1))
        })
        .collect()
}

/// First code point of the packing alphabet: 32,768 CJK code points from U+4E00, all
/// below the surrogates, so every character is one UTF-16 unit.
const BASE: u32 = 0x4E00;

/// Pack bytes 15 bits to a character. The first character holds the byte count mod 8,
/// which with the number of characters fixes the length; unused bits must be zero.
pub fn pack(bytes: &[u8]) -> String {
    let mut out = String::with_capacity(bytes.len() * 8 / 15 * 3 + 6);
    out.push(char::from_u32(BASE + (bytes.len() % 8) as u32).unwrap_or('\u{4E00}'));
    let (mut acc, mut bits) = (0u32, 0u32);
    for &b in bytes {
        acc = (acc << 8) | u32::from(b);
        bits += 8;
        if bits >= 15 {
            bits -= 15;
            out.push(char::from_u32(BASE + ((acc >> bits) & 0x7FFF)).unwrap_or('\u{4E00}'));
            acc &= (1 << bits) - 1;
        }
    }
    if bits > 0 {
        out.push(char::from_u32(BASE + ((acc << (15 - bits)) & 0x7FFF)).unwrap_or('\u{4E00}'));
    }
    out
}

/// The bytes of [`pack`]ed text.
pub fn unpack(text: &str) -> Result<Vec<u8>, String> {
    let mut chars = text.chars();
    let first = chars.next().ok_or("it is empty")?;
    let rem = (first as u32)
        .checked_sub(BASE)
        .filter(|r| *r < 8)
        .ok_or("it was not written by Cuvette")?;
    let values: Vec<u32> = chars
        .map(|c| (c as u32).checked_sub(BASE).filter(|v| *v < 0x8000))
        .collect::<Option<_>>()
        .ok_or("it holds a character Cuvette never writes")?;
    let total_bits = values.len() * 15;
    let most = total_bits / 8;
    let n = [Some(most), most.checked_sub(1)]
        .into_iter()
        .flatten()
        .find(|n| n % 8 == rem as usize && total_bits - n * 8 < 15)
        .ok_or("its length does not match")?;
    let mut out = Vec::with_capacity(n);
    let (mut acc, mut bits) = (0u64, 0u32);
    for v in values {
        acc = (acc << 15) | u64::from(v);
        bits += 15;
        while bits >= 8 && out.len() < n {
            bits -= 8;
            out.push(((acc >> bits) & 0xFF) as u8);
        }
        acc &= (1 << bits) - 1;
    }
    if acc != 0 {
        return Err("its last character is damaged".into());
    }
    Ok(out)
}

/// localStorage in memory, for tests: can refuse writes beyond a size, or after a
/// number of writes (a crash between two writes).
#[derive(Debug, Clone, Default)]
pub struct MemoryStore {
    pub map: std::collections::BTreeMap<String, String>,
    /// Refuse a write that would take the store over this many characters.
    pub quota: Option<usize>,
    /// Refuse every write after this many more.
    pub writes_left: Option<usize>,
}

impl MemoryStore {
    fn chars(&self) -> usize {
        self.map
            .iter()
            .map(|(k, v)| k.chars().count() + v.chars().count())
            .sum()
    }
}

impl KeyValue for MemoryStore {
    fn get(&self, key: &str) -> Option<String> {
        self.map.get(key).cloned()
    }
    fn set(&mut self, key: &str, value: &str) -> Result<(), Refused> {
        if let Some(n) = self.writes_left.as_mut() {
            if *n == 0 {
                return Err(Refused);
            }
            *n -= 1;
        }
        if let Some(q) = self.quota {
            let old = self
                .map
                .get(key)
                .map_or(0, |v| key.chars().count() + v.chars().count());
            if self.chars() - old + key.chars().count() + value.chars().count() > q {
                return Err(Refused);
            }
        }
        self.map.insert(key.to_string(), value.to_string());
        Ok(())
    }
    fn remove(&mut self, key: &str) {
        self.map.remove(key);
    }
    fn keys(&self) -> Vec<String> {
        self.map.keys().cloned().collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::journal::{founding_entries, replay};
    use crate::lab::Lab;

    fn demo_entries() -> Vec<Entry> {
        let lab = Lab::from_json(include_str!("../demo-data/demo-lab.json")).unwrap();
        founding_entries(&lab, "2026-11-27T09:00:00Z".parse().unwrap(), "AK")
    }

    #[test]
    fn packing_round_trips_every_length() {
        for n in 0..200usize {
            let bytes: Vec<u8> = (0..n).map(|k| (k * 37 + 11) as u8).collect();
            let text = pack(&bytes);
            assert_eq!(unpack(&text).unwrap(), bytes, "length {n}");
            assert!(text.chars().all(|c| (c as u32) < 0xD800));
        }
    }

    #[test]
    fn the_journal_round_trips_through_chunks() {
        let entries = demo_entries();
        let mut kv = MemoryStore::default();
        let m = Mirror::new("cuvette.lab.");
        let p1 = m.write(&mut kv, &entries[..60], None).unwrap();
        let p2 = m.write(&mut kv, &entries, Some(&p1)).unwrap();
        assert_eq!(p2.chunks.len(), entries.len().div_ceil(ENTRIES_PER_CHUNK));
        let back = m.read(&kv);
        assert!(back.problems.is_empty(), "{:?}", back.problems);
        assert_eq!(back.entries, entries);
        // Only the pointer and the named chunks are left.
        assert_eq!(kv.map.len(), p2.chunks.len() + 1);
    }

    /// A one-character change to a stored chunk is refused or, where it only touches
    /// bits the data does not depend on (the deflate stream's end padding, a back
    /// reference to an equal earlier string), reads back the same entries: never other
    /// entries. The zlib stream's Adler-32 (RFC 1950 section 2.2) covers the data, and
    /// the deflate format (RFC 1951) is what allows the equal readings.
    #[test]
    fn a_changed_character_in_a_chunk_is_refused_never_misread() {
        let entries = demo_entries();
        let text = encode_chunk(&entries[..12]);
        let chars: Vec<char> = text.chars().collect();
        let (mut refused, mut equal) = (0, 0);
        for i in 0..chars.len() {
            for step in [1u32, 0x2A5, 0x4000] {
                let mut changed = chars.clone();
                let v = (chars[i] as u32 - BASE + step) % 0x8000 + BASE;
                changed[i] = char::from_u32(v).unwrap();
                let changed: String = changed.into_iter().collect();
                match decode_chunk(&changed) {
                    Err(_) => refused += 1,
                    Ok(read) => {
                        assert_eq!(read, entries[..12], "character {i}, step {step:#x}");
                        equal += 1;
                    }
                }
            }
        }
        // Nearly every change is caught; the equal readings are rare.
        assert!(
            equal * 100 < refused,
            "{equal} equal readings, {refused} refused"
        );
    }

    /// Each chunk is checked against the journal on its own: an intact copy passes, an
    /// edited chunk, a missing one and one with other entries are each named.
    #[test]
    fn a_chunk_is_checked_against_the_journal() {
        let lab = crate::demo::demo_lab();
        let entries = founding_entries(&lab, "2026-11-27T09:00:00Z".parse().unwrap(), "AK");
        assert!(
            entries.len() > ENTRIES_PER_CHUNK,
            "the check needs two chunks"
        );
        let m = Mirror::new("cuvette.lab.");
        let mut kv = MemoryStore::default();
        let p = m.write(&mut kv, &entries, None).unwrap();
        for k in 0..p.chunks.len() + 1 {
            assert_eq!(m.check_chunk(&kv, &p, k, &entries), Ok(()), "chunk {k}");
        }
        // Another journal of the same length: its first entry differs.
        let mut other = entries.clone();
        other[3].by = "ZZ".into();
        let e = m.check_chunk(&kv, &p, 0, &other).unwrap_err();
        assert!(e.contains(&format!("from entry {} ", other[3].seq)), "{e}");
        // The last chunk when the journal is shorter than the copy.
        let short = &entries[..ENTRIES_PER_CHUNK + 1];
        assert!(m.check_chunk(&kv, &p, 1, short).is_err());
        assert!(m
            .check_chunk(&kv, &p, 1, &entries[..ENTRIES_PER_CHUNK])
            .is_err());
        // An edited character; a removed chunk.
        let key = p.chunks[1].clone();
        let text = kv.get(&key).unwrap();
        let edited: String = text
            .chars()
            .take(1)
            .chain(
                text.chars()
                    .skip(1)
                    .map(|c| char::from_u32((c as u32 - BASE + 0x1111) % 0x8000 + BASE).unwrap()),
            )
            .collect();
        kv.map.insert(key.clone(), edited);
        let e = m.check_chunk(&kv, &p, 1, &entries).unwrap_err();
        assert!(
            e.starts_with(&format!("the stored chunk {key} cannot be read")),
            "{e}"
        );
        kv.map.remove(&key);
        assert!(m
            .check_chunk(&kv, &p, 1, &entries)
            .unwrap_err()
            .ends_with("it is missing"));
    }

    #[test]
    fn a_crash_between_chunk_and_pointer_leaves_the_earlier_generation() {
        let entries = demo_entries();
        let m = Mirror::new("cuvette.lab.");
        let mut kv = MemoryStore::default();
        let p1 = m.write(&mut kv, &entries[..100], None).unwrap();
        // The chunk is written, the pointer is not (the power went).
        kv.writes_left = Some(1);
        assert!(m.write(&mut kv, &entries, Some(&p1)).is_err());
        kv.writes_left = None;
        let back = m.read(&kv);
        assert_eq!(back.entries, entries[..100].to_vec());
        assert_eq!(back.pointer.as_ref(), Some(&p1));
        // Nothing the pointer does not name is left behind after a sweep.
        m.sweep(&mut kv);
        assert_eq!(kv.map.len(), p1.chunks.len() + 1);
    }

    #[test]
    fn a_full_store_refuses_and_keeps_what_it_had() {
        let entries = demo_entries();
        let m = Mirror::new("cuvette.lab.");
        let mut kv = MemoryStore::default();
        let p1 = m.write(&mut kv, &entries[..10], None).unwrap();
        let before = kv.map.clone();
        kv.quota = Some(kv.chars() + 50);
        assert_eq!(m.write(&mut kv, &entries, Some(&p1)), Err(Refused));
        assert_eq!(kv.map, before);
    }

    #[test]
    fn storage_per_qc_result_is_within_budget() {
        // Issue budget: ≤ 48 characters of localStorage per QC result, trail included,
        // measured on the demo lab (78 runs, 155 results).
        let entries = demo_entries();
        let lab = replay(&entries, None, &[]).lab;
        let results: usize = lab.qc_result_count();
        let mut kv = MemoryStore::default();
        let m = Mirror::new("cuvette.demo.");
        m.write(&mut kv, &entries, None).unwrap();
        let per = m.size(&kv) as f64 / results as f64;
        eprintln!("demo lab: {per:.1} characters of localStorage per QC result");
        assert!(per <= 48.0, "{per:.1} characters per QC result");
    }
}
