//! The content-addressed cache: artifacts by node key, plus two small indexes.
//!
//! Layout under the cache folder (default `.retort/` beside the top recipe):
//! `segments/*.seg` small entries packed together (a checksummed table of key,
//! offset and length, then the entries), written every 250 ms or 4 MiB of work and
//! at the end of a run, so ten thousand small nodes do not cost ten thousand file
//! creations; `objects/<2 hex>/<key>` one file per large entry (over 64 KiB); `files.idx` the stat index
//! (size, mtime, inode -> content hash) that lets re-planning skip hashing unchanged
//! files; `nodes.idx` the last key of every (recipe, step, item), so `plan` can say
//! why a node will run. An entry is a header (magic, the lengths and blake3 sums of
//! its two parts), a head (postcard: run metadata and the artifact without its
//! per-point arrays — records, notes, axes, fit statistics, tables) and a body (the
//! arrays as raw little-endian numbers). A cached node whose dependents are cached
//! too is known by its head alone, so a re-run reads a few hundred bytes per node
//! instead of every spectrum.
//!
//! **Invariant:** every file is published by writing a temporary file in the same
//! folder, syncing it and renaming it into place, so readers (and concurrent runs)
//! never see a torn entry. An entry whose checksum or decoding fails is reported as
//! corrupt, deleted and never trusted. The indexes are advisory: a stale or lost
//! index only costs a re-hash or a vaguer reason.

use serde::de::DeserializeOwned;
use serde::{Deserialize, Serialize};
use stages::{Arrays, Artifact};
use std::collections::{BTreeMap, HashMap};
use std::io::{Read, Write};
#[cfg(not(unix))]
use std::io::{Seek, SeekFrom};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, Mutex, RwLock};

const MAGIC: &[u8; 8] = b"RTRTENT2";
/// Magic, head length, body length, blake3 of the head, blake3 of the body.
const HEADER: usize = 8 + 8 + 8 + 32 + 32;

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

/// What [`Cache::prune`] did.
#[derive(Debug, Default, Clone, PartialEq, Eq)]
pub struct Pruned {
    pub kept: usize,
    pub removed: usize,
    pub bytes_before: u64,
    pub bytes_after: u64,
}

pub type StatIndex = BTreeMap<String, FileStat>;
pub type NodeIndex = BTreeMap<String, LastNode>;

/// Bodies up to this size are read and checked with the head.
const SMALL_BODY: usize = 16 * 1024;
/// Entries up to this size go into shared segment files; larger ones get a file each.
/// Creating a file costs far more than writing to one on some filesystems (0.7 ms
/// per new inode was measured on the development machines), so only entries that
/// would crowd memory while pending (large images) get their own.
const SMALL: usize = 8 * 1024 * 1024;
/// A segment is written when this much is pending, or when the oldest pending
/// entry is this old, and at the end of the run.
const SEGMENT_BYTES: usize = 16 * 1024 * 1024;
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
    entries: Vec<(String, Arc<Vec<u8>>)>,
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
    /// Pending entries by key, for lookups (shared with `pending`).
    pending_keys: RwLock<HashMap<String, Arc<Vec<u8>>>>,
    /// Segment files opened for reading, by path (at most [`OPEN_SEGMENTS`]).
    open: Mutex<HashMap<PathBuf, Arc<std::fs::File>>>,
}

/// Segment files kept open for reading; a run reading thousands of entries from a
/// few segments opens each once.
const OPEN_SEGMENTS: usize = 256;

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

/// A temporary file this old was left by a writer that was killed (a write takes
/// milliseconds; a writer alive on another host never takes an hour).
const ABANDONED: std::time::Duration = std::time::Duration::from_secs(3600);

/// Removes `.tmp-*` files older than [`ABANDONED`] from `dir`.
fn remove_abandoned_temporaries(dir: &Path) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for e in entries.flatten() {
        if !e.file_name().to_string_lossy().starts_with(".tmp-") {
            continue;
        }
        let old = e
            .metadata()
            .and_then(|m| m.modified())
            .ok()
            .and_then(|t| t.elapsed().ok())
            .is_some_and(|age| age > ABANDONED);
        if old {
            let _ = std::fs::remove_file(e.path());
        }
    }
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
        remove_abandoned_temporaries(&dir);
        remove_abandoned_temporaries(&dir.join("segments"));
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
            open: Mutex::new(HashMap::new()),
        })
    }

    pub fn object_path(&self, key: &str) -> PathBuf {
        let shard = key.get(..2).unwrap_or("00");
        self.dir.join("objects").join(shard).join(key)
    }

    /// Opens a file for reading, reusing an open segment file.
    fn open_for_read(&self, path: &Path, segment: bool) -> std::io::Result<Arc<std::fs::File>> {
        if segment {
            if let Some(f) = self.open.lock().ok().and_then(|o| o.get(path).cloned()) {
                return Ok(f);
            }
        }
        let f = Arc::new(std::fs::File::open(path)?);
        if segment {
            if let Ok(mut o) = self.open.lock() {
                if o.len() < OPEN_SEGMENTS {
                    o.insert(path.to_path_buf(), Arc::clone(&f));
                }
            }
        }
        Ok(f)
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

    /// The open file holding an entry, with the entry's offset and length.
    fn locate_open(&self, key: &str) -> std::io::Result<Option<(Arc<std::fs::File>, u64, u64)>> {
        if let Some((path, loc)) = self.segment_loc(key) {
            let f = self.open_for_read(&path, true)?;
            return Ok(Some((f, loc.offset, u64::from(loc.len))));
        }
        match std::fs::File::open(self.object_path(key)) {
            Ok(f) => {
                let len = f.metadata()?.len();
                Ok(Some((Arc::new(f), 0, len)))
            }
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
            Err(e) => Err(e),
        }
    }

    /// Reads an entry's bytes into `buf` (replacing its contents). Ok(false) when
    /// absent.
    fn raw_into(&self, key: &str, buf: &mut Vec<u8>) -> Result<bool, String> {
        buf.clear();
        if let Some(b) = self
            .pending_keys
            .read()
            .ok()
            .and_then(|p| p.get(key).cloned())
        {
            buf.extend_from_slice(&b);
            return Ok(true);
        }
        let unreadable = |e: std::io::Error| format!("unreadable: {e}");
        let Some((f, offset, len)) = self.locate_open(key).map_err(unreadable)? else {
            return Ok(false);
        };
        buf.resize(len as usize, 0);
        read_at(&f, buf, offset).map_err(|e| format!("truncated entry: {e}"))?;
        Ok(true)
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

    /// Reads and verifies a whole entry. Corrupt entries are discarded.
    pub fn load(&self, key: &str) -> Lookup {
        self.read_entry(key)
    }

    /// Reads, verifies and decodes only an entry's head: the run metadata and the
    /// artifact with its per-point arrays empty (see [`Artifact::take_arrays`]).
    /// The body is not read, so damage to it is found when it is (by [`Cache::load`]).
    pub fn load_head(&self, key: &str) -> Lookup {
        let result = match self.raw_head(key) {
            Ok(None) => return Lookup::Missing,
            Ok(Some((b, false))) => decode_head(&b),
            // A small body came along: check it too.
            Ok(Some((b, true))) => decode_entry(&b).map(|(meta, mut artifact)| {
                artifact.take_arrays();
                (meta, artifact)
            }),
            Err(reason) => Err(reason),
        };
        match result {
            Ok(v) => Lookup::Found(Box::new(v)),
            Err(reason) => {
                self.discard(key);
                Lookup::Corrupt(reason)
            }
        }
    }

    /// An entry's header and head (two reads: the header, then the head it sizes),
    /// or the whole entry when its body is small (then `true`), so that only large
    /// arrays are left to be checked when they are read.
    fn raw_head(&self, key: &str) -> Result<Option<(Vec<u8>, bool)>, String> {
        if let Some(b) = self
            .pending_keys
            .read()
            .ok()
            .and_then(|p| p.get(key).cloned())
        {
            return Ok(Some((b.to_vec(), true)));
        }
        let unreadable = |e: std::io::Error| format!("unreadable: {e}");
        let Some((f, offset, len)) = self.locate_open(key).map_err(unreadable)? else {
            return Ok(None);
        };
        if len < HEADER as u64 {
            return Err(format!("truncated ({len} bytes)"));
        }
        let mut b = vec![0u8; HEADER];
        read_at(&f, &mut b, offset).map_err(|e| format!("truncated entry: {e}"))?;
        let end = head_end(&b).ok_or("bad header")?;
        if end as u64 > len {
            return Err(format!("truncated ({len} bytes, head ends at {end})"));
        }
        let whole = len - end as u64 <= SMALL_BODY as u64;
        b.resize(if whole { len as usize } else { end }, 0);
        read_at(&f, &mut b[HEADER..], offset + HEADER as u64)
            .map_err(|e| format!("truncated entry: {e}"))?;
        Ok(Some((b, whole)))
    }

    /// Reads, checks (both checksums) and decodes a whole entry. A thread's read
    /// buffer is reused, so reading thousands of entries does not fault in fresh
    /// pages for each.
    fn read_entry(&self, key: &str) -> Lookup {
        thread_local! {
            static BUF: std::cell::RefCell<Vec<u8>> = const { std::cell::RefCell::new(Vec::new()) };
        }
        BUF.with(|buf| {
            let mut buf = buf.borrow_mut();
            let found = self.raw_into(key, &mut buf);
            let result = match found {
                Ok(false) => return Lookup::Missing,
                Ok(true) => decode_entry(&buf),
                Err(reason) => Err(reason),
            };
            // A large entry's buffer is not kept for the rest of the run.
            if buf.capacity() > SMALL {
                *buf = Vec::new();
            }
            match result {
                Ok(v) => Lookup::Found(Box::new(v)),
                Err(reason) => {
                    self.discard(key);
                    Lookup::Corrupt(reason)
                }
            }
        })
    }

    /// Checks an entry without keeping it: None when absent, Some(Err) when corrupt
    /// (left in place; the run will replace it).
    pub fn verify(&self, key: &str) -> Option<Result<(), String>> {
        let mut bytes = Vec::new();
        match self.raw_into(key, &mut bytes) {
            Ok(true) => Some(split_entry(&bytes).map(|_| ())),
            Ok(false) => None,
            Err(e) => Some(Err(e)),
        }
    }

    /// Stores an artifact (its arrays are moved out while the head is encoded and
    /// put back before this returns).
    pub fn store(&self, key: &str, meta: &Meta, artifact: &mut Artifact) -> Result<(), String> {
        let arrays = artifact.take_arrays();
        let head = postcard::to_stdvec(&(meta, &*artifact));
        let body = encode_arrays(&arrays);
        artifact
            .put_arrays(arrays)
            .map_err(|e| format!("cannot restore artifact arrays: {e}"))?;
        let head = head.map_err(|e| format!("cannot encode artifact: {e}"))?;
        let bytes = entry(&head, &body);
        if bytes.len() > SMALL || key_bytes(key).is_none() {
            return self.publish(&self.object_path(key), &bytes);
        }
        let bytes = Arc::new(bytes);
        if let Ok(mut pk) = self.pending_keys.write() {
            pk.insert(key.to_string(), Arc::clone(&bytes));
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

    fn write_segment(&self, entries: Vec<(String, Arc<Vec<u8>>)>) -> Result<(), String> {
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

    /// Keeps only the entries whose keys are in `keep`: kept entries are checked and
    /// copied into fresh segments (large ones stay where they are), then every older
    /// segment file and every object not kept is removed. Run it when no other run
    /// uses the cache: a run that opened the cache before would find its entries
    /// gone and recompute them.
    pub fn prune(&self, keep: &std::collections::HashSet<String>) -> Result<Pruned, String> {
        self.flush()?;
        let (old_files, keys): (Vec<PathBuf>, Vec<String>) = {
            let segs = self
                .segments
                .read()
                .map_err(|_| "cache lock poisoned".to_string())?;
            (segs.files.clone(), segs.index.keys().cloned().collect())
        };
        let size = |p: &Path| std::fs::metadata(p).map(|m| m.len()).unwrap_or(0);
        let mut summary = Pruned::default();
        summary.bytes_before += old_files.iter().map(|p| size(p)).sum::<u64>();
        let mut batch: Vec<(String, Arc<Vec<u8>>)> = Vec::new();
        let mut pending = 0usize;
        for key in keys {
            if !keep.contains(&key) {
                summary.removed += 1;
                continue;
            }
            let mut bytes = Vec::new();
            if !matches!(self.raw_into(&key, &mut bytes), Ok(true)) || split_entry(&bytes).is_err()
            {
                summary.removed += 1;
                continue;
            }
            summary.kept += 1;
            pending += bytes.len();
            batch.push((key, Arc::new(bytes)));
            if pending >= SEGMENT_BYTES {
                self.write_segment(std::mem::take(&mut batch))?;
                pending = 0;
            }
        }
        if !batch.is_empty() {
            self.write_segment(batch)?;
        }
        let new_files: Vec<PathBuf> = self
            .segments
            .read()
            .map(|s| s.files[old_files.len().min(s.files.len())..].to_vec())
            .unwrap_or_default();
        if let Ok(mut open) = self.open.lock() {
            open.clear();
        }
        for f in &old_files {
            std::fs::remove_file(f).map_err(|e| io_err(f, e))?;
        }
        summary.bytes_after += new_files.iter().map(|p| size(p)).sum::<u64>();
        if let Ok(shards) = std::fs::read_dir(self.dir.join("objects")) {
            for shard in shards.flatten() {
                let Ok(entries) = std::fs::read_dir(shard.path()) else {
                    continue;
                };
                for e in entries.flatten() {
                    let name = e.file_name().to_string_lossy().to_string();
                    let bytes = size(&e.path());
                    summary.bytes_before += bytes;
                    if keep.contains(&name) {
                        summary.kept += 1;
                        summary.bytes_after += bytes;
                    } else {
                        summary.removed += 1;
                        std::fs::remove_file(e.path()).map_err(|err| io_err(&e.path(), err))?;
                    }
                }
            }
        }
        // The segment table of this process now lists only the new files.
        if let Ok(mut segs) = self.segments.write() {
            let index = std::mem::take(&mut segs.index);
            let shift = old_files.len();
            segs.files = new_files;
            segs.index = index
                .into_iter()
                .filter(|(_, loc)| loc.segment >= shift)
                .map(|(k, loc)| {
                    let loc = Loc {
                        segment: loc.segment - shift,
                        ..loc
                    };
                    (k, loc)
                })
                .collect();
        }
        Ok(summary)
    }

    fn read_index<T: DeserializeOwned + Default>(&self, name: &str) -> T {
        std::fs::read(self.dir.join(name))
            .ok()
            .and_then(|b| split_entry(&b).ok().map(|(h, _)| h.to_vec()))
            .and_then(|head| postcard::from_bytes(&head).ok())
            .unwrap_or_default()
    }

    fn write_index<T: Serialize>(&self, name: &str, value: &T) -> Result<(), String> {
        let payload = postcard::to_stdvec(value).map_err(|e| e.to_string())?;
        self.publish(&self.dir.join(name), &entry(&payload, &[]))
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

#[cfg(unix)]
fn read_at(f: &std::fs::File, buf: &mut [u8], offset: u64) -> std::io::Result<()> {
    std::os::unix::fs::FileExt::read_exact_at(f, buf, offset)
}

#[cfg(not(unix))]
fn read_at(f: &std::fs::File, buf: &mut [u8], offset: u64) -> std::io::Result<()> {
    let mut f = f;
    f.seek(SeekFrom::Start(offset))?;
    f.read_exact(buf)
}

fn u64_at(b: &[u8], at: usize) -> Option<u64> {
    let mut x = [0u8; 8];
    x.copy_from_slice(b.get(at..at + 8)?);
    Some(u64::from_le_bytes(x))
}

/// Where the head of an entry whose first bytes are `b` ends.
fn head_end(b: &[u8]) -> Option<usize> {
    if b.get(..8)? != MAGIC {
        return None;
    }
    HEADER.checked_add(usize::try_from(u64_at(b, 8)?).ok()?)
}

/// Decodes the head of an entry given its header and head bytes.
fn decode_head(b: &[u8]) -> Result<(Meta, Artifact), String> {
    let end = head_end(b).ok_or("bad header")?;
    if b.len() != end {
        return Err("truncated head".into());
    }
    let head = &b[HEADER..end];
    if blake3::hash(head).as_bytes() != &b[24..56] {
        return Err("checksum mismatch".into());
    }
    postcard::from_bytes(head).map_err(|e| format!("cannot decode: {e}"))
}

/// An entry: header, head, body.
fn entry(head: &[u8], body: &[u8]) -> Vec<u8> {
    let mut out = Vec::with_capacity(HEADER + head.len() + body.len());
    out.extend_from_slice(MAGIC);
    out.extend_from_slice(&(head.len() as u64).to_le_bytes());
    out.extend_from_slice(&(body.len() as u64).to_le_bytes());
    out.extend_from_slice(blake3::hash(head).as_bytes());
    out.extend_from_slice(blake3::hash(body).as_bytes());
    out.extend_from_slice(head);
    out.extend_from_slice(body);
    out
}

/// The verified head and body of an entry.
fn split_entry(bytes: &[u8]) -> Result<(&[u8], &[u8]), String> {
    if bytes.len() < HEADER || &bytes[..8] != MAGIC {
        return Err("bad header".into());
    }
    let len = |at| u64_at(bytes, at).and_then(|v| usize::try_from(v).ok());
    let (Some(head_len), Some(body_len)) = (len(8), len(16)) else {
        return Err("bad header".into());
    };
    let total = HEADER
        .checked_add(head_len)
        .and_then(|v| v.checked_add(body_len))
        .ok_or("bad header")?;
    if bytes.len() != total {
        return Err(format!(
            "truncated ({} of {} bytes after the header)",
            bytes.len() - HEADER,
            head_len + body_len
        ));
    }
    let head = &bytes[HEADER..HEADER + head_len];
    let body = &bytes[HEADER + head_len..total];
    if blake3::hash(head).as_bytes() != &bytes[24..56]
        || blake3::hash(body).as_bytes() != &bytes[56..88]
    {
        return Err("checksum mismatch".into());
    }
    Ok((head, body))
}

fn decode_entry(bytes: &[u8]) -> Result<(Meta, Artifact), String> {
    let (head, body) = split_entry(bytes)?;
    let (meta, mut artifact): (Meta, Artifact) =
        postcard::from_bytes(head).map_err(|e| format!("cannot decode: {e}"))?;
    let arrays = decode_arrays(body).ok_or("cannot decode the arrays")?;
    artifact
        .put_arrays(arrays)
        .map_err(|e| format!("cannot decode: {e}"))?;
    Ok((meta, artifact))
}

/// The body: four counts (f64, f32, u32 and byte arrays), each array's length,
/// then every array's elements, little-endian.
fn encode_arrays(a: &Arrays) -> Vec<u8> {
    let lens: Vec<u64> = (a.f64s.iter().map(Vec::len))
        .chain(a.f32s.iter().map(Vec::len))
        .chain(a.u32s.iter().map(Vec::len))
        .chain(a.bytes.iter().map(Vec::len))
        .map(|n| n as u64)
        .collect();
    let mut out = Vec::with_capacity(16 + lens.len() * 8 + a.byte_len());
    for n in [a.f64s.len(), a.f32s.len(), a.u32s.len(), a.bytes.len()] {
        out.extend_from_slice(&(n as u32).to_le_bytes());
    }
    for n in &lens {
        out.extend_from_slice(&n.to_le_bytes());
    }
    for v in &a.f64s {
        out.extend(v.iter().flat_map(|x| x.to_le_bytes()));
    }
    for v in &a.f32s {
        out.extend(v.iter().flat_map(|x| x.to_le_bytes()));
    }
    for v in &a.u32s {
        out.extend(v.iter().flat_map(|x| x.to_le_bytes()));
    }
    for v in &a.bytes {
        out.extend_from_slice(v);
    }
    out
}

/// Numbers of `N` little-endian bytes each (a trailing partial number is ignored;
/// callers size `raw` exactly).
fn from_le<T, const N: usize>(raw: &[u8], f: fn([u8; N]) -> T) -> Vec<T> {
    raw.chunks_exact(N)
        .map(|c| {
            let mut x = [0u8; N];
            x.copy_from_slice(c);
            f(x)
        })
        .collect()
}

fn decode_arrays(b: &[u8]) -> Option<Arrays> {
    let mut at = 0usize;
    let mut take = |n: usize| -> Option<&[u8]> {
        let s = b.get(at..at.checked_add(n)?)?;
        at += n;
        Some(s)
    };
    let mut counts = [0usize; 4];
    for c in &mut counts {
        let mut x = [0u8; 4];
        x.copy_from_slice(take(4)?);
        *c = u32::from_le_bytes(x) as usize;
    }
    let total = counts.iter().try_fold(0usize, |a, c| a.checked_add(*c))?;
    if total > b.len() / 8 {
        return None;
    }
    let mut lens = Vec::with_capacity(total);
    for _ in 0..total {
        let mut x = [0u8; 8];
        x.copy_from_slice(take(8)?);
        lens.push(usize::try_from(u64::from_le_bytes(x)).ok()?);
    }
    let mut lens = lens.into_iter();
    let mut a = Arrays::default();
    for _ in 0..counts[0] {
        let raw = take(lens.next()?.checked_mul(8)?)?;
        a.f64s.push(from_le(raw, f64::from_le_bytes));
    }
    for _ in 0..counts[1] {
        let raw = take(lens.next()?.checked_mul(4)?)?;
        a.f32s.push(from_le(raw, f32::from_le_bytes));
    }
    for _ in 0..counts[2] {
        let raw = take(lens.next()?.checked_mul(4)?)?;
        a.u32s.push(from_le(raw, u32::from_le_bytes));
    }
    for _ in 0..counts[3] {
        a.bytes.push(take(lens.next()?)?.to_vec());
    }
    (at == b.len()).then_some(a)
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
        c.store("abcd", &meta(), &mut a.clone()).unwrap();
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

    fn test_meta() -> Meta {
        Meta {
            stage: "s".into(),
            stage_version: 1,
            engine_version: "0".into(),
            started: "t".into(),
            duration_ms: 0.0,
            host: "h".into(),
        }
    }

    #[test]
    fn pruning_keeps_the_named_entries_and_drops_the_rest() {
        let dir = tempfile::tempdir().unwrap();
        let meta = test_meta();
        let c = Cache::open(dir.path(), false).unwrap();
        let art = |i: u8| {
            Artifact::new(Value::Summary).with_results(vec![Record::number(
                "i",
                f64::from(i),
                None,
                "",
            )])
        };
        for i in 0..6u8 {
            c.store(&key(i), &meta, &mut art(i)).unwrap();
            // Several segments, as several runs would leave.
            c.flush().unwrap();
        }
        let keep: std::collections::HashSet<String> = [key(1), key(4)].into_iter().collect();
        let p = c.prune(&keep).unwrap();
        assert_eq!((p.kept, p.removed), (2, 4));
        assert!(p.bytes_after < p.bytes_before);
        let segments = std::fs::read_dir(dir.path().join("segments"))
            .unwrap()
            .count();
        assert_eq!(segments, 1);
        for c in [c, Cache::open(dir.path(), false).unwrap()] {
            assert!(matches!(c.load(&key(1)), Lookup::Found(b) if b.1 == art(1)));
            assert!(matches!(c.load(&key(4)), Lookup::Found(b) if b.1 == art(4)));
            assert!(matches!(c.load(&key(0)), Lookup::Missing));
            assert!(matches!(c.load(&key(5)), Lookup::Missing));
        }
    }

    #[test]
    fn temporaries_of_killed_writers_are_removed_when_old() {
        let dir = tempfile::tempdir().unwrap();
        drop(Cache::open(dir.path(), false).unwrap());
        let seg = dir.path().join("segments");
        let old = seg.join(".tmp-abandoned");
        let fresh = seg.join(".tmp-in-progress");
        std::fs::write(&old, b"x").unwrap();
        std::fs::write(&fresh, b"x").unwrap();
        let f = std::fs::File::options().write(true).open(&old).unwrap();
        f.set_modified(std::time::SystemTime::now() - 2 * ABANDONED)
            .unwrap();
        drop(f);
        drop(Cache::open(dir.path(), false).unwrap());
        assert!(!old.exists());
        assert!(
            fresh.exists(),
            "a recent temporary may belong to a live writer"
        );
    }

    #[test]
    fn heads_leave_the_arrays_out_and_whole_loads_put_them_back() {
        let dir = tempfile::tempdir().unwrap();
        let c = Cache::open(dir.path(), false).unwrap();
        let meta = test_meta();
        // 5,000 points: a body too large to come along with the head.
        let x: Vec<f64> = (0..5000).map(f64::from).collect();
        let s = stages::Spectrum::new(
            x.clone(),
            x.iter().map(|v| v * 0.5).collect(),
            stages::Axis::new("x", ""),
            stages::Axis::new("y", ""),
        );
        let a = Artifact::new(Value::Spectrum(s))
            .with_results(vec![Record::number("r", 2.0, None, "")]);
        c.store(&key(1), &meta, &mut a.clone()).unwrap();
        c.flush().unwrap();
        let c = Cache::open(dir.path(), false).unwrap();
        match c.load_head(&key(1)) {
            Lookup::Found(b) => {
                assert_eq!(b.1.results, a.results);
                assert!(b.1.spectrum().unwrap().x.is_empty());
            }
            _ => panic!("head not found"),
        }
        match c.load(&key(1)) {
            Lookup::Found(b) => assert_eq!(b.1, a),
            _ => panic!("entry not found"),
        }
        // Damage in the body is not seen by the head, and is by a whole load.
        let (path, offset, len) = c.locate(&key(1)).unwrap();
        let mut bytes = std::fs::read(&path).unwrap();
        bytes[(offset + len - 1) as usize] ^= 1;
        std::fs::write(&path, &bytes).unwrap();
        assert!(matches!(c.load_head(&key(1)), Lookup::Found(_)));
        assert!(matches!(c.load(&key(1)), Lookup::Corrupt(r) if r.contains("checksum")));
        assert!(matches!(c.load_head(&key(1)), Lookup::Missing));
    }

    fn key(i: u8) -> String {
        blake3::hash(&[i]).to_hex().to_string()
    }

    #[test]
    fn small_entries_go_into_segments_that_survive_reopening_and_corruption() {
        let dir = tempfile::tempdir().unwrap();
        let meta = test_meta();
        let c = Cache::open(dir.path(), false).unwrap();
        for i in 0..10u8 {
            let a = Artifact::new(Value::Summary).with_results(vec![Record::number(
                "i",
                f64::from(i),
                None,
                "",
            )]);
            c.store(&key(i), &meta, &mut a.clone()).unwrap();
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
        c.store(&key(4), &meta, &mut a.clone()).unwrap();
        c.flush().unwrap();
        let c = Cache::open(dir.path(), false).unwrap();
        assert!(matches!(c.load(&key(4)), Lookup::Found(b) if b.1 == a));
    }
}
