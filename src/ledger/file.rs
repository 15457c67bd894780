//! Reading and writing ledger files.
//!
//! A change is written as databases write a commit: take the ledger's lock (`NAME.lock`
//! beside it, an advisory lock the system drops when its process ends, however it ends),
//! read the file's latest content, apply the change, write the whole ledger to a temporary
//! file in the same folder, `sync_all` it, rename it over the ledger, and sync the folder so
//! the rename itself is on disk. A reader sees the old file or the new one, never a part; a
//! kill at any moment leaves at worst the temporary file, which the next writer replaces.

use std::fs::{File, OpenOptions};
use std::io::{self, Write};
use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use anyhow::{Context, Result, anyhow, bail};

use super::key::{self, folder_of};
use super::{FORMAT, Ledger, Stored, VERSION};

/// How long a writer waits for another to finish before giving up.
const LOCK_WAIT: Duration = Duration::from_secs(20);

/// Writes a ledger's bytes in place of the old file, durably. The disk writer is
/// [`DiskWriter`]; tests put in one that fails on purpose.
pub trait Writer: Send {
    /// Replaces the content of `path` with `bytes`; on `Ok` the new content is on disk.
    fn replace(&mut self, path: &Path, bytes: &[u8]) -> io::Result<()>;
}

/// The writer to the disk: [`replace_locked`].
#[derive(Clone, Copy, Debug, Default)]
pub struct DiskWriter;

impl Writer for DiskWriter {
    fn replace(&mut self, path: &Path, bytes: &[u8]) -> io::Result<()> {
        replace_locked(path, bytes)
    }
}

impl<F: FnMut(&Path, &[u8]) -> io::Result<()> + Send> Writer for F {
    fn replace(&mut self, path: &Path, bytes: &[u8]) -> io::Result<()> {
        self(path, bytes)
    }
}

/// A ledger's one temporary file, `.NAME.tmp` beside it. Only the holder of the lock writes
/// it, so one name is enough, and what a killed writer left there is simply replaced by the
/// next (no listing of a folder that may hold a whole dataset).
pub fn temp_path(path: &Path) -> PathBuf {
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    path.with_file_name(format!(".{name}.tmp"))
}

/// The permission bits a replacement of `path` is made with: the old file's, or the usual.
#[cfg(unix)]
fn mode_of(path: &Path) -> u32 {
    use std::os::unix::fs::PermissionsExt;
    std::fs::metadata(path).map(|m| m.permissions().mode() & 0o7777).unwrap_or(0o666)
}

/// Replaces `path` with `bytes` through its temporary file ([`temp_path`]): written, synced,
/// renamed over `path`, then the folder synced. Call it under the ledger's lock. A failed write
/// removes the temporary file again (on a full disk it would hold on to space).
pub fn replace_locked(path: &Path, bytes: &[u8]) -> io::Result<()> {
    let tmp = temp_path(path);
    match std::fs::remove_file(&tmp) {
        Err(e) if e.kind() != io::ErrorKind::NotFound => return Err(e),
        _ => {}
    }
    let mut o = OpenOptions::new();
    o.write(true).create_new(true);
    #[cfg(unix)]
    std::os::unix::fs::OpenOptionsExt::mode(&mut o, mode_of(path));
    let mut f = o.open(&tmp)?;
    let written = f.write_all(bytes).and_then(|()| f.sync_all());
    drop(f);
    if let Err(e) = written.and_then(|()| std::fs::rename(&tmp, path)) {
        std::fs::remove_file(&tmp).ok();
        return Err(e);
    }
    sync_folder(path)
}

/// Syncs the folder of `path`, so a rename into it is on disk.
fn sync_folder(path: &Path) -> io::Result<()> {
    File::open(folder_of(path))?.sync_all()
}

/// Replaces `path` with `bytes` without a lock (an export): a temporary file of its own in the
/// same folder, written and synced, renamed over `path`, then the folder synced.
pub fn write_durably(path: &Path, bytes: &[u8]) -> io::Result<()> {
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let mut b = tempfile::Builder::new();
    let prefix = format!(".{name}.");
    b.prefix(&prefix).suffix(".tmp");
    #[cfg(unix)]
    b.permissions(std::os::unix::fs::PermissionsExt::from_mode(mode_of(path)));
    let mut tmp = b.tempfile_in(folder_of(path))?;
    tmp.write_all(bytes)?;
    tmp.as_file().sync_all()?;
    tmp.persist(path).map_err(|e| e.error)?;
    sync_folder(path)
}

/// Why a ledger could not be saved, with what to do.
#[derive(Debug, Clone, PartialEq)]
pub struct SaveError {
    /// The ledger file.
    pub file: PathBuf,
    /// What was being done, e.g. "write the ledger".
    pub step: String,
    /// The system's kind of error, when it was one.
    pub kind: Option<io::ErrorKind>,
    /// What the system or the reader said.
    pub cause: String,
}

impl SaveError {
    fn io(file: &Path, step: impl Into<String>, e: &io::Error) -> SaveError {
        SaveError { file: file.to_path_buf(), step: step.into(), kind: Some(e.kind()), cause: e.to_string() }
    }

    /// What the user can do about it.
    pub fn advice(&self) -> &'static str {
        match self.kind {
            Some(io::ErrorKind::StorageFull | io::ErrorKind::QuotaExceeded) => {
                "The disk is full: free some space on it, or keep the ledger on another disk."
            }
            Some(io::ErrorKind::ReadOnlyFilesystem) => {
                "The folder is on a read-only file system: make it writable, or keep the ledger in another folder."
            }
            Some(io::ErrorKind::PermissionDenied) => {
                "You may not write in that folder: change its permissions, or keep the ledger in another folder."
            }
            Some(io::ErrorKind::WouldBlock | io::ErrorKind::TimedOut) => {
                "Another spurion is writing this ledger and did not finish in time: try again."
            }
            Some(_) => "Check the disk and the folder, then try again.",
            None => "The ledger was left as it is: restore it from a backup, or move it away to start a new one.",
        }
    }
}

impl std::fmt::Display for SaveError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "cannot save the ledger {}: could not {}: {}. {}", self.file.display(), self.step, self.cause, self.advice())
    }
}

impl std::error::Error for SaveError {}

/// Reads the ledger at `path`: `None` when there is no file. A file that does not parse, or is
/// of a newer version, is an error naming it (and is never written over by this module).
pub fn load(path: &Path) -> Result<Option<Ledger>> {
    let bytes = match std::fs::read(path) {
        Ok(b) => b,
        Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(e).with_context(|| format!("cannot read the ledger {}", path.display())),
    };
    let text = String::from_utf8(bytes).map_err(|_| damaged(path, "it is not UTF-8 text"))?;
    parse(path, &text).map(Some)
}

fn damaged(path: &Path, what: impl std::fmt::Display) -> anyhow::Error {
    anyhow!(
        "{} is not a readable spurion ledger: {what}. It was left as it is: restore it from a backup, or \
         move it away to start a new ledger",
        path.display()
    )
}

/// A ledger from the text of the file `path`.
pub fn parse(path: &Path, text: &str) -> Result<Ledger> {
    let v: serde_json::Value = serde_json::from_str(text).map_err(|e| damaged(path, e))?;
    match v.get("format").and_then(|f| f.as_str()) {
        Some(FORMAT) => {}
        Some(other) => bail!(
            "{} is not a spurion ledger: its \"format\" is \"{other}\", not \"{FORMAT}\". It was left as it is: \
             give the ledger another file name",
            path.display()
        ),
        None => return Err(damaged(path, format!("it has no \"format\": \"{FORMAT}\""))),
    }
    match v.get("version").and_then(|x| x.as_u64()) {
        Some(n) if n == VERSION as u64 => {}
        Some(n) if n > VERSION as u64 => bail!(
            "the ledger {} is of version {n}, written by a newer spurion; this one reads version {VERSION}. \
             Update spurion to use it (the file was left as it is)",
            path.display()
        ),
        _ => return Err(damaged(path, format!("its \"version\" is missing or not one this spurion reads ({VERSION})"))),
    }
    let s: Stored = serde_json::from_value(v).map_err(|e| damaged(path, e))?;
    if s.root.trim().is_empty() || s.root.contains('\0') {
        return Err(damaged(path, "its \"root\" is empty (\".\" is the ledger's own folder)"));
    }
    for (k, e) in &s.images {
        key::validate(k).map_err(|err| damaged(path, err))?;
        for (i, d) in e.drawn.iter().enumerate() {
            d.shape.check().map_err(|err| damaged(path, format!("drawn region {i} of {k}: {err}")))?;
        }
    }
    Ok(Ledger::from_stored(path, s))
}

/// The ledger's lock file.
pub fn lock_path(path: &Path) -> PathBuf {
    let mut name = path.file_name().map(|n| n.to_os_string()).unwrap_or_default();
    name.push(".lock");
    path.with_file_name(name)
}

/// Holds the ledger's lock while alive.
struct Lock {
    _file: File,
}

fn lock(path: &Path) -> Result<Lock, SaveError> {
    let lp = lock_path(path);
    let file = OpenOptions::new()
        .create(true)
        .truncate(false)
        .write(true)
        .open(&lp)
        .map_err(|e| SaveError::io(path, format!("open its lock file {}", lp.display()), &e))?;
    let deadline = Instant::now() + LOCK_WAIT;
    loop {
        match file.try_lock() {
            Ok(()) => return Ok(Lock { _file: file }),
            Err(std::fs::TryLockError::WouldBlock) if Instant::now() < deadline => std::thread::sleep(Duration::from_millis(5)),
            Err(std::fs::TryLockError::WouldBlock) => {
                let e = io::Error::new(io::ErrorKind::TimedOut, format!("its lock file {} stayed locked for {} s", lp.display(), LOCK_WAIT.as_secs()));
                return Err(SaveError::io(path, "take its lock", &e));
            }
            Err(std::fs::TryLockError::Error(e)) => return Err(SaveError::io(path, format!("lock {}", lp.display()), &e)),
        }
    }
}

/// Changes the ledger at `path` durably: under its lock, reads its latest content (a new
/// ledger rooted at `root` when there is none), lets `change` edit it, and writes it with
/// `writer`. Returns the ledger as saved and what `change` returned. On an error nothing on
/// disk has changed.
pub fn commit<T>(
    path: &Path,
    root: Option<&Path>,
    writer: &mut dyn Writer,
    change: impl FnOnce(&mut Ledger) -> T,
) -> Result<(Ledger, T), SaveError> {
    let _lock = lock(path)?;
    let read_error = |e: anyhow::Error| SaveError { file: path.to_path_buf(), step: "read it first".into(), kind: None, cause: format!("{e:#}") };
    let mut ledger = match load(path) {
        Ok(Some(l)) => l,
        Ok(None) => Ledger::new(path, root).map_err(read_error)?,
        Err(e) => {
            // A file we cannot open for reading (rather than one we cannot parse) is an I/O matter.
            if let Some(io) = e.downcast_ref::<io::Error>() {
                return Err(SaveError::io(path, "read it first", io));
            }
            return Err(read_error(e));
        }
    };
    let out = change(&mut ledger);
    let text = ledger.to_json().map_err(|e| SaveError { file: path.to_path_buf(), step: "serialise it".into(), kind: None, cause: e.to_string() })?;
    writer.replace(path, text.as_bytes()).map_err(|e| SaveError::io(path, "write it", &e))?;
    Ok((ledger, out))
}
