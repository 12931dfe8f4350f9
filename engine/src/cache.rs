//! The content-addressed cache: artifacts by node key, plus two small indexes.
//!
//! Layout under the cache folder (default `.retort/` beside the top recipe):
//! `segments/*.seg` small entries packed together (a checksummed table of key,
//! offset and length, then the entries), written every 250 ms or 4 MiB of work and
//! at the end of a run, so ten thousand small nodes do not cost ten thousand file
//! creations; `objects/<2 hex>/<key>` one file per large entry (over 64 KiB); `files.idx` the stat index
//! (size, mtime, inode -> content hash) that lets re-planning skip hashing unchanged
//! files; `nodes.idx` the last key of every (recipe, step, item), so `plan` can say
//! why a node will run. An entry is a header (magic, payload length, blake3 of the
//! payload) and a postcard payload (run metadata, artifact).
//!
//! **Invariant:** every file is published by writing a temporary file in the same
//! folder, syncing it and renaming it into place, so readers (and concurrent runs)
//! never see a torn entry. An entry whose checksum or decoding fails is reported as
//! corrupt, deleted and never trusted. The indexes are advisory: a stale or lost
//! index only costs a re-hash or a vaguer reason.

use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};
use stages::Artifact;
use std::collections::{BTreeMap, HashMap};
use std::io::{Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Mutex, RwLock};

const MAGIC: &[u8; 8] = b"RTRTENT1";
const HEADER: usize = 8 + 8 + 32;

/// How and when an artifact was made (provenance of cached nodes).
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct Meta {
    pub stage: String,
    pub stage_version: u32,
    pub engine_version: String,
    /// RFC 3339 UTC.
    pub started: String,
    pub duration_ms: f64,
    pub host: String,
}

/// What a lookup found.
pub enum Lookup {
    Missing,
    /// The entry existed but could not be trusted (and was removed).
    Corrupt(String),
    Found(Box<(Meta, Artifact)>),
}

/// One file's identity in the stat index.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq, Eq)]
pub struct FileStat {
    pub size: u64,
    pub mtime_s: i64,
    pub mtime_ns: u32,
    pub inode: u64,
    pub hash: String,
}

/// The last run of one (recipe, step, item), for telling why a node reruns.
#[derive(Clone, Debug, Serialize, Deserialize, PartialEq)]
pub struct LastNode {
    pub key: String,
    pub stage_version: u32,
    /// blake3 of the canonical options JSON.
    pub options: String,
    /// (shown path, content hash) of the files read directly.
    pub files: Vec<(String, String)>,
    /// Keys of the inputs, in port order.
    pub inputs: Vec<String>,
}

pub type StatIndex = BTreeMap<String, FileStat>;
pub type NodeIndex = BTreeMap<String, LastNode>;

/// Entries up to this size go into shared segment files; larger ones get a file each.
const SMALL: usize = 64 * 1024;
/// A segment is written when this much is pending, or when the oldest pending
/// entry is this old, and at the end of the run.
const SEGMENT_BYTES: usize = 4 * 1024 * 1024;
pub const SEGMENT_AGE: std::time::Duration = std::time::Duration::from_millis(250);
const SEGMENT_MAGIC: &[u8; 8] = b"RTRTSEG1";

/// Where a small entry lives: segment file and byte range.
#[derive(Clone, Debug)]
struct Loc {
    segment: usize,
    offset: u64,
    len: u32,
}

#[derive(Default)]
struct Segments {
    files: Vec<PathBuf>,
    index: HashMap<String, Loc>,
}

#[derive(Default)]
struct Pending {
    entries: Vec<(String, Vec<u8>)>,
    bytes: usize,
    since: Option<std::time::Instant>,
}

pub struct Cache {
    pub dir: PathBuf,
    /// fsync before publishing (off only for throwaway caches).
    durable: bool,
    segments: RwLock<Segments>,
    /// Small entries written by this process and not yet in a segment.
    pending: Mutex<Pending>,
    /// Keys of pending entries, for lookups (a copy of the bytes lives in `pending`).
    pending_keys: RwLock<HashMap<String, Vec<u8>>>,
}

fn io_err(path: &Path, e: impl std::fmt::Display) -> String {
    format!("{}: {e}", path.display())
}

/// Reads a segment's table: (key, offset, len) per entry. None when the segment is
/// unreadable or its table fails its checksum (the whole segment is then ignored).
fn read_segment_table(path: &Path) -> Option<Vec<(String, u64, u32)>> {
    let mut f = std::fs::File::open(path).ok()?;
    let mut head = [0u8; 12];
    f.read_exact(&mut head).ok()?;
    if &head[..8] != SEGMENT_MAGIC {
        return None;
    }
    let count = u32::from_le_bytes([head[8], head[9], head[10], head[11]]) as usize;
    let mut table = vec![0u8; count.checked_mul(44)?];
    f.read_exact(&mut table).ok()?;
    let mut sum = [0u8; 32];
    f.read_exact(&mut sum).ok()?;
    let mut h = blake3::Hasher::new();
    h.update(&head);
    h.update(&table);
    if h.finalize().as_bytes() != &sum {
        return None;
    }
    let mut out = Vec::with_capacity(count);
    for e in table.chunks_exact(44) {
        let key = e[..32]
            .iter()
            .map(|b| format!("{b:02x}"))
            .collect::<String>();
        let mut off = [0u8; 8];
        off.copy_from_slice(&e[32..40]);
        let len = u32::from_le_bytes([e[40], e[41], e[42], e[43]]);
        out.push((key, u64::from_le_bytes(off), len));
    }
    Some(out)
}

/// This machine's name, reduced to characters safe in a file name.
fn host_tag() -> &'static str {
    static TAG: std::sync::OnceLock<String> = std::sync::OnceLock::new();
    TAG.get_or_init(|| {
        let h = hostname::get()
            .map(|h| h.to_string_lossy().to_string())
            .unwrap_or_default();
        let t: String = h
            .chars()
            .filter(|c| c.is_ascii_alphanumeric() || *c == '.' || *c == '_')
            .take(40)
            .collect();
        if t.is_empty() {
            "host".into()
        } else {
            t
        }
    })
}

fn key_bytes(key: &str) -> Option<[u8; 32]> {
    let mut out = [0u8; 32];
    if key.len() != 64 {
        return None;
    }
    for (i, b) in out.iter_mut().enumerate() {
        *b = u8::from_str_radix(key.get(2 * i..2 * i + 2)?, 16).ok()?;
    }
    Some(out)
}

impl Cache {
    /// Opens (creating) the cache at `dir` and reads the tables of its segments
    /// (later segments win, so a recomputed entry replaces a corrupt one).
    pub fn open(dir: &Path, durable: bool) -> Result<Cache, String> {
        std::fs::create_dir_all(dir.join("objects")).map_err(|e| io_err(dir, e))?;
        std::fs::create_dir_all(dir.join("segments")).map_err(|e| io_err(dir, e))?;
        let dir = dir.canonicalize().map_err(|e| io_err(dir, e))?;
        let mut names: Vec<PathBuf> = std::fs::read_dir(dir.join("segments"))
            .map_err(|e| io_err(&dir, e))?
            .flatten()
            .map(|e| e.path())
            .filter(|p| p.extension().is_some_and(|x| x == "seg"))
            .collect();
        names.sort();
        let mut segs = Segments::default();
        for path in names {
            if let Some(table) = read_segment_table(&path) {
                let segment = segs.files.len();
                segs.files.push(path);
                for (key, offset, len) in table {
                    segs.index.insert(
                        key,
                        Loc {
                            segment,
                            offset,
                            len,
                        },
                    );
                }
            }
        }
        Ok(Cache {
            dir,
            durable,
            segments: RwLock::new(segs),
            pending: Mutex::new(Pending::default()),
            pending_keys: RwLock::new(HashMap::new()),
        })
    }

    pub fn object_path(&self, key: &str) -> PathBuf {
        let shard = key.get(..2).unwrap_or("00");
        self.dir.join("objects").join(shard).join(key)
    }

    fn segment_loc(&self, key: &str) -> Option<(PathBuf, Loc)> {
        let segs = self.segments.read().ok()?;
        let loc = segs.index.get(key)?.clone();
        Some((segs.files.get(loc.segment)?.clone(), loc))
    }

    /// Where an entry's bytes are: (file, offset, length); None for a pending or
    /// missing entry. For tests and tools that need to look at the raw entry.
    pub fn locate(&self, key: &str) -> Option<(PathBuf, u64, u64)> {
        if let Some((path, loc)) = self.segment_loc(key) {
            return Some((path, loc.offset, u64::from(loc.len)));
        }
        let p = self.object_path(key);
        let len = std::fs::metadata(&p).ok()?.len();
        Some((p, 0, len))
    }

    pub fn contains(&self, key: &str) -> bool {
        self.pending_keys.read().is_ok_and(|p| p.contains_key(key))
            || self.segment_loc(key).is_some()
            || self.object_path(key).is_file()
    }

    /// The raw bytes of an entry: Ok(None) when absent.
    fn raw(&self, key: &str) -> Result<Option<Vec<u8>>, String> {
        if let Some(b) = self
            .pending_keys
            .read()
            .ok()
            .and_then(|p| p.get(key).cloned())
        {
            return Ok(Some(b));
        }
        if let Some((path, loc)) = self.segment_loc(key) {
            let mut f = std::fs::File::open(&path).map_err(|e| format!("unreadable: {e}"))?;
            f.seek(SeekFrom::Start(loc.offset))
                .map_err(|e| format!("unreadable: {e}"))?;
            let mut b = vec![0u8; loc.len as usize];
            f.read_exact(&mut b)
                .map_err(|e| format!("truncated segment: {e}"))?;
            return Ok(Some(b));
        }
        match std::fs::read(self.object_path(key)) {
            Ok(b) => Ok(Some(b)),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
            Err(e) => Err(format!("unreadable: {e}")),
        }
    }

    /// Forgets a corrupt entry (its own file is removed; a segment entry is dropped
    /// from the index and superseded when the node is stored again).
    fn discard(&self, key: &str) {
        if let Ok(mut segs) = self.segments.write() {
            if segs.index.remove(key).is_some() {
                return;
            }
        }
        let _ = std::fs::remove_file(self.object_path(key));
    }

    /// Reads and verifies an entry. Corrupt entries are discarded.
    pub fn load(&self, key: &str) -> Lookup {
        let bytes = match self.raw(key) {
            Ok(Some(b)) => b,
            Ok(None) => return Lookup::Missing,
            Err(reason) => {
                self.discard(key);
                return Lookup::Corrupt(reason);
            }
        };
        match decode::<(Meta, Artifact)>(&bytes) {
            Ok(v) => Lookup::Found(Box::new(v)),
            Err(reason) => {
                self.discard(key);
                Lookup::Corrupt(reason)
            }
        }
    }

    /// Checks an entry without keeping it: None when absent, Some(Err) when corrupt
    /// (left in place; the run will replace it).
    pub fn verify(&self, key: &str) -> Option<Result<(), String>> {
        match self.raw(key) {
            Ok(Some(bytes)) => Some(check_envelope(&bytes).map(|_| ())),
            Ok(None) => None,
            Err(e) => Some(Err(e)),
        }
    }

    pub fn store(&self, key: &str, meta: &Meta, artifact: &Artifact) -> Result<(), String> {
        let payload = postcard::to_stdvec(&(meta, artifact))
            .map_err(|e| format!("cannot encode artifact: {e}"))?;
        let bytes = envelope(&payload);
        if bytes.len() > SMALL || key_bytes(key).is_none() {
            return self.publish(&self.object_path(key), &bytes);
        }
        if let Ok(mut pk) = self.pending_keys.write() {
            pk.insert(key.to_string(), bytes.clone());
        }
        let batch = {
            let mut p = self
                .pending
                .lock()
                .map_err(|_| "cache lock poisoned".to_string())?;
            p.bytes += bytes.len();
            p.entries.push((key.to_string(), bytes));
            let since = *p.since.get_or_insert_with(std::time::Instant::now);
            if p.bytes >= SEGMENT_BYTES || since.elapsed() >= SEGMENT_AGE {
                Some(std::mem::take(&mut *p))
            } else {
                None
            }
        };
        match batch {
            Some(b) => self.write_segment(b.entries),
            None => Ok(()),
        }
    }

    /// Writes the pending entries if the oldest has waited long enough (called by
    /// the scheduler between nodes, so a slow stage does not hold finished work back).
    pub fn flush_due(&self) -> Result<(), String> {
        let due = self
            .pending
            .lock()
            .map(|p| p.since.is_some_and(|t| t.elapsed() >= SEGMENT_AGE))
            .unwrap_or(false);
        if due {
            self.flush()
        } else {
            Ok(())
        }
    }

    /// Writes every pending entry into a segment. Call at the end of a run.
    pub fn flush(&self) -> Result<(), String> {
        let batch = match self.pending.lock() {
            Ok(mut p) => std::mem::take(&mut *p),
            Err(_) => return Err("cache lock poisoned".into()),
        };
        if batch.entries.is_empty() {
            return Ok(());
        }
        self.write_segment(batch.entries)
    }

    fn write_segment(&self, entries: Vec<(String, Vec<u8>)>) -> Result<(), String> {
        static COUNTER: AtomicU64 = AtomicU64::new(0);
        let count = entries.len() as u32;
        let header_len = 12 + entries.len() * 44 + 32;
        let mut table = Vec::with_capacity(entries.len() * 44);
        let mut offset = header_len as u64;
        let mut locs = Vec::new();
        for (key, bytes) in &entries {
            table.extend_from_slice(&key_bytes(key).unwrap_or_default());
            table.extend_from_slice(&offset.to_le_bytes());
            table.extend_from_slice(&(bytes.len() as u32).to_le_bytes());
            locs.push((key.clone(), offset, bytes.len() as u32));
            offset += bytes.len() as u64;
        }
        let mut head = Vec::with_capacity(12);
        head.extend_from_slice(SEGMENT_MAGIC);
        head.extend_from_slice(&count.to_le_bytes());
        let mut h = blake3::Hasher::new();
        h.update(&head);
        h.update(&table);
        let mut out = Vec::with_capacity(offset as usize);
        out.extend_from_slice(&head);
        out.extend_from_slice(&table);
        out.extend_from_slice(h.finalize().as_bytes());
        for (_, bytes) in &entries {
            out.extend_from_slice(bytes);
        }
        let nanos = std::time::SystemTime::now()
            .duration_since(std::time::UNIX_EPOCH)
            .map(|d| d.as_nanos())
            .unwrap_or(0);
        let n = COUNTER.fetch_add(1, Ordering::Relaxed);
        // Host and pid make the name unique among writers on a shared filesystem.
        let name = format!(
            "{nanos:020}-{}-{}-{n:06}.seg",
            host_tag(),
            std::process::id()
        );
        let path = self.dir.join("segments").join(name);
        self.publish(&path, &out)?;
        if let Ok(mut segs) = self.segments.write() {
            let segment = segs.files.len();
            segs.files.push(path);
            for (key, offset, len) in locs {
                segs.index.insert(
                    key,
                    Loc {
                        segment,
                        offset,
                        len,
                    },
                );
            }
        }
        if let Ok(mut pk) = self.pending_keys.write() {
            for (key, _) in &entries {
                pk.remove(key);
            }
        }
        Ok(())
    }

    /// Writes `bytes` to `path` atomically (temp file in the same folder, sync, rename).
    pub fn publish(&self, path: &Path, bytes: &[u8]) -> Result<(), String> {
        let dir = path.parent().unwrap_or(&self.dir);
        std::fs::create_dir_all(dir).map_err(|e| io_err(dir, e))?;
        let mut tmp = tempfile::Builder::new()
            .prefix(".tmp-")
            .tempfile_in(dir)
            .map_err(|e| io_err(dir, e))?;
        tmp.write_all(bytes).map_err(|e| io_err(path, e))?;
        if self.durable {
            tmp.as_file().sync_all().map_err(|e| io_err(path, e))?;
        }
        tmp.persist(path).map_err(|e| io_err(path, e.error))?;
        Ok(())
    }

    fn read_index<T: DeserializeOwned + Default>(&self, name: &str) -> T {
        std::fs::read(self.dir.join(name))
            .ok()
            .and_then(|b| decode(&b).ok())
            .unwrap_or_default()
    }

    fn write_index<T: Serialize>(&self, name: &str, value: &T) -> Result<(), String> {
        let payload = postcard::to_stdvec(value).map_err(|e| e.to_string())?;
        self.publish(&self.dir.join(name), &envelope(&payload))
    }

    pub fn stat_index(&self) -> StatIndex {
        self.read_index("files.idx")
    }
    pub fn save_stat_index(&self, idx: &StatIndex) -> Result<(), String> {
        self.write_index("files.idx", idx)
    }
    pub fn node_index(&self) -> NodeIndex {
        self.read_index("nodes.idx")
    }
    /// Merges `updates` into the node index on disk.
    pub fn update_node_index(&self, updates: NodeIndex) -> Result<(), String> {
        let mut idx = self.node_index();
        idx.extend(updates);
        self.write_index("nodes.idx", &idx)
    }
}

fn envelope(payload: &[u8]) -> Vec<u8> {
    let mut out = Vec::with_capacity(HEADER + payload.len());
    out.extend_from_slice(MAGIC);
    out.extend_from_slice(&(payload.len() as u64).to_le_bytes());
    out.extend_from_slice(blake3::hash(payload).as_bytes());
    out.extend_from_slice(payload);
    out
}

fn check_envelope(bytes: &[u8]) -> Result<&[u8], String> {
    if bytes.len() < HEADER || &bytes[..8] != MAGIC {
        return Err("bad header".into());
    }
    let mut len = [0u8; 8];
    len.copy_from_slice(&bytes[8..16]);
    let len = u64::from_le_bytes(len) as usize;
    let payload = &bytes[HEADER..];
    if payload.len() != len {
        return Err(format!(
            "truncated ({} of {len} payload bytes)",
            payload.len()
        ));
    }
    if blake3::hash(payload).as_bytes() != &bytes[16..48] {
        return Err("checksum mismatch".into());
    }
    Ok(payload)
}

fn decode<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, String> {
    let payload = check_envelope(bytes)?;
    postcard::from_bytes(payload).map_err(|e| format!("cannot decode: {e}"))
}

#[cfg(test)]
mod tests {
    use super::*;
    use stages::{Record, Value};

    fn meta() -> Meta {
        Meta {
            stage: "x.y".into(),
            stage_version: 1,
            engine_version: "0".into(),
            started: "t".into(),
            duration_ms: 1.0,
            host: "h".into(),
        }
    }

    #[test]
    fn round_trip_and_corruption_is_detected_and_removed() {
        let dir = tempfile::tempdir().unwrap();
        let c = Cache::open(dir.path(), true).unwrap();
        let a = Artifact::new(Value::Summary).with_results(vec![Record::number(
            "m",
            1.5,
            Some(0.1),
            "eV",
        )]);
        c.store("abcd", &meta(), &a).unwrap();
        match c.load("abcd") {
            Lookup::Found(b) => assert_eq!(b.1, a),
            _ => panic!("not found"),
        }
        // A key that is not 64 hex digits is stored in a file of its own.
        let p = c.object_path("abcd");
        let mut bytes = std::fs::read(&p).unwrap();
        let n = bytes.len();
        bytes[n - 1] ^= 0xff;
        std::fs::write(&p, &bytes).unwrap();
        assert!(matches!(c.load("abcd"), Lookup::Corrupt(r) if r.contains("checksum")));
        assert!(!p.exists());
        std::fs::write(&p, &bytes[..20]).unwrap();
        assert!(matches!(c.load("abcd"), Lookup::Corrupt(_)));
        assert!(matches!(c.load("abcd"), Lookup::Missing));
    }
}

#[cfg(test)]
mod segment_tests {
    use super::*;
    use stages::{Record, Value};

    fn key(i: u8) -> String {
        blake3::hash(&[i]).to_hex().to_string()
    }

    #[test]
    fn small_entries_go_into_segments_that_survive_reopening_and_corruption() {
        let dir = tempfile::tempdir().unwrap();
        let meta = Meta {
            stage: "s".into(),
            stage_version: 1,
            engine_version: "0".into(),
            started: "t".into(),
            duration_ms: 0.0,
            host: "h".into(),
        };
        let c = Cache::open(dir.path(), false).unwrap();
        for i in 0..10u8 {
            let a = Artifact::new(Value::Summary).with_results(vec![Record::number(
                "i",
                f64::from(i),
                None,
                "",
            )]);
            c.store(&key(i), &meta, &a).unwrap();
        }
        // Pending entries are readable before the flush.
        assert!(matches!(c.load(&key(3)), Lookup::Found(_)));
        c.flush().unwrap();
        drop(c);
        let c = Cache::open(dir.path(), false).unwrap();
        assert!(c.contains(&key(9)));
        let (path, offset, len) = c.locate(&key(4)).unwrap();
        assert!(path.to_string_lossy().ends_with(".seg"));
        match c.load(&key(4)) {
            Lookup::Found(b) => assert_eq!(b.1.results[0].as_number(), Some(4.0)),
            _ => panic!("entry 4 not found"),
        }
        // Corrupt entry 4 inside its segment: detected, dropped, the others intact.
        let mut bytes = std::fs::read(&path).unwrap();
        bytes[(offset + len - 1) as usize] ^= 0xff;
        std::fs::write(&path, &bytes).unwrap();
        assert!(matches!(c.load(&key(4)), Lookup::Corrupt(_)));
        assert!(matches!(c.load(&key(4)), Lookup::Missing));
        assert!(matches!(c.load(&key(5)), Lookup::Found(_)));
        // Storing it again supersedes the corrupt copy, also after reopening.
        let a = Artifact::new(Value::Summary);
        c.store(&key(4), &meta, &a).unwrap();
        c.flush().unwrap();
        let c = Cache::open(dir.path(), false).unwrap();
        assert!(matches!(c.load(&key(4)), Lookup::Found(b) if b.1 == a));
    }
}
