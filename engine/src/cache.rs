//! The content-addressed cache: artifacts by node key, plus two small indexes.
//!
//! Layout under the cache folder (default `.retort/` beside the top recipe):
//! `objects/<2 hex>/<key>` one entry per node key; `files.idx` the stat index
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
use std::collections::BTreeMap;
use std::io::Write;
use std::path::{Path, PathBuf};

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

pub struct Cache {
    pub dir: PathBuf,
    /// fsync before publishing (off only for throwaway caches).
    durable: bool,
}

fn io_err(path: &Path, e: impl std::fmt::Display) -> String {
    format!("{}: {e}", path.display())
}

impl Cache {
    /// Opens (creating) the cache at `dir`.
    pub fn open(dir: &Path, durable: bool) -> Result<Cache, String> {
        std::fs::create_dir_all(dir.join("objects")).map_err(|e| io_err(dir, e))?;
        let dir = dir.canonicalize().map_err(|e| io_err(dir, e))?;
        Ok(Cache { dir, durable })
    }

    pub fn object_path(&self, key: &str) -> PathBuf {
        let shard = key.get(..2).unwrap_or("00");
        self.dir.join("objects").join(shard).join(key)
    }

    pub fn contains(&self, key: &str) -> bool {
        self.object_path(key).is_file()
    }

    /// Reads and verifies an entry. Corrupt entries are removed.
    pub fn load(&self, key: &str) -> Lookup {
        let path = self.object_path(key);
        let bytes = match std::fs::read(&path) {
            Ok(b) => b,
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Lookup::Missing,
            Err(e) => return Lookup::Corrupt(format!("unreadable: {e}")),
        };
        match decode::<(Meta, Artifact)>(&bytes) {
            Ok(v) => Lookup::Found(Box::new(v)),
            Err(reason) => {
                let _ = std::fs::remove_file(&path);
                Lookup::Corrupt(reason)
            }
        }
    }

    /// Checks an entry without keeping it: None when absent, Some(Err) when corrupt
    /// (left in place; the run will replace it).
    pub fn verify(&self, key: &str) -> Option<Result<(), String>> {
        let bytes = std::fs::read(self.object_path(key)).ok()?;
        Some(check_envelope(&bytes).map(|_| ()))
    }

    pub fn store(&self, key: &str, meta: &Meta, artifact: &Artifact) -> Result<(), String> {
        let payload = postcard::to_stdvec(&(meta, artifact))
            .map_err(|e| format!("cannot encode artifact: {e}"))?;
        let path = self.object_path(key);
        self.publish(&path, &envelope(&payload))
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
