//! The sweep's cache: each image's result stored under a key made from everything that decides
//! it (the model's hash, the image file's content hash, the settings, spurion's version), so a
//! repeated sweep costs nothing, a stopped one goes on, and a changed setting recomputes what it
//! changes. An entry is written to a temporary file and renamed into place, so a killed sweep
//! leaves whole entries or none.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::{Context, Result};
use ndarray::Array2;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use super::row::Row;

/// A cached result: the row (path and group aside: the same content elsewhere is the same
/// reading) and the map on the model grid.
pub struct Entry {
    pub row: Row,
    pub grid: Array2<f32>,
}

#[derive(Serialize, Deserialize)]
struct Stored {
    row: Row,
}

pub struct Cache {
    dir: PathBuf,
}

/// The key of one image's result: the model, the image's content, the sweep's settings, what
/// else decides this image's result (regions drawn on it), and spurion's version.
pub fn key(model_sha256: &str, content_sha256: &str, settings: &str, image_extra: &str) -> String {
    let mut h = Sha256::new();
    for part in [model_sha256, content_sha256, settings, image_extra, env!("CARGO_PKG_VERSION")] {
        h.update(part.as_bytes());
        h.update([0u8]);
    }
    h.finalize().iter().map(|b| format!("{b:02x}")).collect()
}

/// The sha256 of a file's bytes.
pub fn content_sha256(path: &Path) -> Result<String> {
    let bytes = std::fs::read(path).with_context(|| format!("cannot read {}", path.display()))?;
    Ok(Sha256::digest(&bytes).iter().map(|b| format!("{b:02x}")).collect())
}

impl Cache {
    pub fn open(dir: &Path) -> Result<Cache> {
        std::fs::create_dir_all(dir).with_context(|| format!("cannot create the cache folder {} (check permissions or give --cache)", dir.display()))?;
        Ok(Cache { dir: dir.to_path_buf() })
    }

    fn paths(&self, key: &str) -> (PathBuf, PathBuf) {
        let sub = self.dir.join(&key[..2]);
        (sub.join(format!("{key}.json")), sub.join(format!("{key}.npy")))
    }

    /// The entry under `key`, if a whole one is there (a damaged one counts as absent).
    pub fn get(&self, key: &str) -> Option<Entry> {
        let (json, npy) = self.paths(key);
        let stored: Stored = serde_json::from_slice(&std::fs::read(json).ok()?).ok()?;
        let grid = crate::feed::read_tensor(&npy).ok()?.into_dimensionality().ok()?;
        Some(Entry { row: stored.row, grid })
    }

    /// Stores an entry: the map first, then the row, each through a temporary file renamed into
    /// place, so a reader sees the row only once the map is there.
    pub fn put(&self, key: &str, entry: &Entry) -> Result<()> {
        let (json, npy) = self.paths(key);
        let sub = json.parent().expect("entries live in a sub-folder");
        std::fs::create_dir_all(sub).with_context(|| format!("cannot create {}", sub.display()))?;
        let tmp = temp_file_in(sub).with_context(|| format!("cannot write in the cache {}", sub.display()))?;
        crate::feed::write_tensor(tmp.path(), &entry.grid.clone().into_dyn())?;
        tmp.persist(&npy).with_context(|| format!("cannot store {}", npy.display()))?;
        let mut tmp = temp_file_in(sub).with_context(|| format!("cannot write in the cache {}", sub.display()))?;
        tmp.write_all(&serde_json::to_vec(&Stored { row: entry.row.clone() })?)?;
        tmp.persist(&json).with_context(|| format!("cannot store {}", json.display()))?;
        Ok(())
    }
}

/// A temporary file in `dir` to be renamed into place, created with the mode a plain new file
/// gets (0666 less the umask, typically 0644) instead of tempfile's private 0600, so that a
/// sweep's files can be read by whoever can read `explain`'s.
pub fn temp_file_in(dir: &Path) -> std::io::Result<tempfile::NamedTempFile> {
    let mut b = tempfile::Builder::new();
    #[cfg(unix)]
    b.permissions(std::os::unix::fs::PermissionsExt::from_mode(0o666));
    b.tempfile_in(dir)
}
