//! A ledger kept open by a long-lived front end: every change shows in memory at once and is
//! saved at once; a save that fails (a full disk, a read-only folder, no permission, a damaged
//! file) keeps the change in memory as unsaved, says why, and is tried again at the next change
//! or on [`Store::retry`]. Nothing the curator did is dropped while the store lives.

use std::path::{Path, PathBuf};

use anyhow::{Result, bail};

use super::file::{self, DiskWriter, SaveError, Writer};
use super::{Change, Ledger};

/// What is not saved yet, and why.
#[derive(Clone, Debug, PartialEq)]
pub struct Unsaved {
    /// Changes kept in memory only.
    pub changes: usize,
    /// The images they touch, sorted.
    pub images: Vec<String>,
    /// Why the last save failed.
    pub error: SaveError,
}

impl Unsaved {
    /// One paragraph for the user: which file, what failed, what to do, what is kept.
    pub fn message(&self) -> String {
        let what = if self.changes == 1 { "1 change".to_string() } else { format!("{} changes", self.changes) };
        let on = if self.images.len() == 1 { format!("on {}", self.images[0]) } else { format!("on {} images", self.images.len()) };
        format!("{} Not saved yet: {what} {on}, kept in memory and saved as soon as the ledger can be written (at the next change, or on retry).", self.error)
    }
}

/// A ledger open for changes, saving each one at once.
pub struct Store {
    ledger: Ledger,
    root: Option<PathBuf>,
    queue: Vec<Change>,
    writer: Box<dyn Writer>,
    failure: Option<SaveError>,
}

impl Store {
    /// Opens the ledger at `path` (a new one when there is none, written at its first change).
    /// A damaged or newer ledger is refused.
    pub fn open(path: &Path) -> Result<Store> {
        Store::open_with(path, None, Box::new(DiskWriter))
    }

    /// Opens with the root a new ledger records (see [`Ledger::new`]) and a writer of one's
    /// choosing (tests use one that fails on purpose).
    pub fn open_with(path: &Path, root: Option<&Path>, writer: Box<dyn Writer>) -> Result<Store> {
        let ledger = match file::load(path)? {
            Some(l) => l,
            None => Ledger::new(path, root)?,
        };
        Ok(Store { ledger, root: root.map(Path::to_path_buf), queue: Vec::new(), writer, failure: None })
    }

    /// The ledger as the user sees it: as saved, plus the unsaved changes.
    pub fn ledger(&self) -> &Ledger {
        &self.ledger
    }

    /// Applies a change in memory and saves everything unsaved. An error only when the change
    /// itself is not valid (then nothing changed); a failed save is kept, see [`Store::pending`].
    pub fn change(&mut self, change: Change) -> Result<()> {
        self.apply(change)?;
        self.save().ok();
        Ok(())
    }

    /// Applies a change in memory without saving (call [`Store::save`] after a batch).
    pub fn apply(&mut self, change: Change) -> Result<()> {
        change.check()?;
        self.ledger.apply(&change);
        self.queue.push(change);
        Ok(())
    }

    /// Saves every unsaved change: under the ledger's lock, replayed on the file's latest
    /// content (so changes other writers made meanwhile are kept and show here afterwards).
    pub fn save(&mut self) -> Result<(), Unsaved> {
        if self.queue.is_empty() {
            self.failure = None;
            return Ok(());
        }
        let Store { ledger, root, queue, writer, failure } = self;
        match file::commit(ledger.path(), root.as_deref(), writer.as_mut(), |l| queue.iter().for_each(|c| l.apply(c))) {
            Ok((saved, ())) => {
                *ledger = saved;
                queue.clear();
                *failure = None;
                Ok(())
            }
            Err(e) => {
                *failure = Some(e);
                Err(self.pending().expect("a failure was just recorded"))
            }
        }
    }

    /// Tries again to save what is unsaved.
    pub fn retry(&mut self) -> Result<(), Unsaved> {
        self.save()
    }

    /// What is not saved, and why; `None` when everything is on disk.
    pub fn pending(&self) -> Option<Unsaved> {
        let error = self.failure.clone()?;
        let mut images: Vec<String> = self.queue.iter().map(|c| c.image.clone()).collect();
        images.sort();
        images.dedup();
        Some(Unsaved { changes: self.queue.len(), images, error })
    }

    /// Changes not on disk yet (applied but not saved, or whose save failed).
    pub fn unsaved_changes(&self) -> usize {
        self.queue.len()
    }

    /// Rereads the file, keeping the unsaved changes on top (to see what others saved).
    pub fn reload(&mut self) -> Result<()> {
        if let Some(mut l) = file::load(self.ledger.path())? {
            self.queue.iter().for_each(|c| l.apply(c));
            self.ledger = l;
        }
        Ok(())
    }

    /// Keeps the ledger at another place from now on (when its folder cannot be written):
    /// writes all of it there, unsaved changes included. Refuses a place that already holds a
    /// ledger. The old file is left as it was.
    pub fn save_as(&mut self, path: &Path) -> Result<()> {
        if file::load(path)?.is_some() {
            bail!("{} already holds a ledger; choose another file, or open that ledger instead", path.display());
        }
        let moved = self.ledger.moved_to(path)?;
        let (saved, ()) = file::commit(path, None, self.writer.as_mut(), |l| *l = moved.clone())?;
        self.ledger = saved;
        self.queue.clear();
        self.failure = None;
        Ok(())
    }
}
