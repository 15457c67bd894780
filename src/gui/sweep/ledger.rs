//! The curator's ledger in the inspector: opened on a worker (opening reads the file), then
//! kept by `ledger::BackgroundStore`, whose own thread saves every change at once, so a verdict
//! shows the moment its key is pressed and the frame never waits on the disk. A save that fails
//! keeps the change in memory, says why, and is tried again every few seconds.

use std::cell::RefCell;
use std::collections::HashMap;
use std::path::{Path, PathBuf};

use crate::ledger::{BackgroundStore, Change, DiskWriter, Edit, Entry, Ledger, Status, Store, Unsaved, Verdict};
use crate::regions::DrawnFile;
use crate::regions::drawn::DrawnShape;

use crate::gui::app::Inspector;
use crate::gui::short_name;
use crate::gui::state::{Drawn, JobId, NoteKind};
use crate::gui::work::Done;

/// The ledger as the inspector holds it.
#[derive(Default)]
pub struct LedgerState {
    /// The file open, or being opened.
    pub path: Option<PathBuf>,
    /// The path field of the ledger section (another ledger to open).
    pub field: String,
    pub store: Option<BackgroundStore>,
    pub opening: Option<JobId>,
    /// Why the file named could not be opened.
    pub error: Option<String>,
    /// Counts the changes to what the ledger shows (a change made here, or news from its thread).
    pub generation: u64,
    /// The note being typed, for the image key it belongs to; written when the field is left.
    pub note_draft: Option<(String, String)>,
    looked_up: RefCell<HashMap<PathBuf, LookedUp>>,
}

/// What the ledger says of one image path: at which generation, its key or why it has none,
/// the regions drawn on it.
type LookedUp = (u64, Result<String, String>, Drawn);

impl LedgerState {
    pub fn ledger(&self) -> Option<&Ledger> {
        self.store.as_ref().map(BackgroundStore::ledger)
    }

    pub fn status(&self) -> Option<Status> {
        self.store.as_ref().map(BackgroundStore::status)
    }

    /// The image's key in the ledger, or why it has none, and the regions drawn on it.
    fn look_up(&self, image: &Path) -> (Result<String, String>, Drawn) {
        let Some(l) = self.ledger() else {
            let why = if self.opening.is_some() { "the ledger is still opening" } else { "no ledger is open" };
            return (Err(why.into()), Drawn::default());
        };
        if let Some((g, k, d)) = self.looked_up.borrow().get(image)
            && *g == self.generation
        {
            return (k.clone(), d.clone());
        }
        let key = l.key_for(image).map_err(|e| format!("{e:#}"));
        let drawn = key.as_ref().ok().and_then(|k| l.entry(k)).filter(|e| !e.drawn.is_empty());
        let drawn = Drawn::new(drawn.map(|e| DrawnFile::new(e.image_size, e.drawn.clone())));
        self.looked_up.borrow_mut().insert(image.to_path_buf(), (self.generation, key.clone(), drawn.clone()));
        (key, drawn)
    }

    pub fn key_of(&self, image: &Path) -> Result<String, String> {
        self.look_up(image).0
    }

    pub fn drawn_of(&self, image: &Path) -> Drawn {
        self.look_up(image).1
    }

    pub fn entry_of(&self, image: &Path) -> Option<&Entry> {
        let k = self.key_of(image).ok()?;
        self.ledger()?.entry(&k)
    }

    pub fn verdict_of(&self, image: &Path) -> Option<Verdict> {
        self.entry_of(image).and_then(|e| e.verdict)
    }

    /// Where the changes are, in words; `true` when something is not saved.
    pub fn status_line(&self) -> (String, bool) {
        match (&self.path, self.status()) {
            (None, _) => ("no ledger".into(), false),
            (Some(p), None) if self.opening.is_some() => (format!("opening ledger {}…", short_name(p)), false),
            (Some(p), None) => (format!("ledger {} not open", short_name(p)), true),
            (Some(_), Some(Status::Saved)) => match self.ledger().map_or(0, Ledger::len) {
                0 => ("ledger empty: its file is written at the first verdict".into(), false),
                n => (format!("ledger saved ({})", if n == 1 { "1 image".to_string() } else { format!("{n} images") }), false),
            },
            (Some(_), Some(Status::Saving { changes })) => (format!("ledger saving ({})…", changes_text(changes)), false),
            (Some(_), Some(Status::Unsaved(u))) => (format!("ledger NOT saved: {}", u.message()), true),
        }
    }
}

fn changes_text(n: usize) -> String {
    if n == 1 { "1 change".into() } else { format!("{n} changes") }
}

impl Inspector {
    /// Opens the ledger at `path` (a folder means its `spurion-ledger.json`) on a worker. A new
    /// ledger whose folder does not hold `dataset` records `dataset` as its root.
    pub fn open_ledger(&mut self, path: &Path, dataset: Option<&Path>) {
        if let Some(Status::Unsaved(u)) = self.ledger.status() {
            self.note(
                NoteKind::Error,
                format!("the ledger was not switched, so that nothing is lost: {} Free the disk or fix the folder first.", u.message()),
            );
            return;
        }
        let file = Ledger::file_for(path);
        let folder = file.parent().map(Path::to_path_buf).unwrap_or_default();
        let root = dataset.filter(|d| !d.starts_with(&folder) && !folder.as_os_str().is_empty()).map(Path::to_path_buf);
        let (f, g) = (file.clone(), file.clone());
        let (id, _) = self.workers.spawn(
            format!("opening ledger {}", short_name(&file)),
            false,
            move |_, _| Done::Ledger { result: Store::open_with(&f, root.as_deref(), Box::new(DiskWriter)).map_err(|e| format!("{e:#}")), path: f },
            move |msg| Done::Ledger { path: g, result: Err(msg) },
        );
        self.ledger.opening = Some(id);
        self.ledger.path = Some(file);
        self.ledger.error = None;
    }

    /// The opening worker's answer.
    pub(crate) fn ledger_opened(&mut self, path: PathBuf, result: Result<Store, String>) {
        if self.ledger.path.as_deref() != Some(path.as_path()) {
            return;
        }
        self.ledger.opening = None;
        match result {
            Ok(store) => {
                if let Some(u) = self.close_ledger() {
                    self.note(NoteKind::Error, format!("the ledger opened before could not save everything: {}", u.message()));
                }
                let ctx = self.ctx.clone();
                let n = store.ledger().len();
                self.ledger.store = Some(BackgroundStore::spawn(store, move || ctx.request_repaint()));
                self.ledger.generation += 1;
                self.note(NoteKind::Info, format!("ledger {} open ({n} images in it)", path.display()));
            }
            Err(e) => {
                self.note(NoteKind::Error, format!("the ledger cannot be opened: {e}"));
                self.ledger.error = Some(e);
            }
        }
    }

    /// Takes the ledger thread's news (each frame).
    pub(crate) fn poll_ledger(&mut self) {
        if self.ledger.store.as_mut().is_some_and(BackgroundStore::poll) {
            self.ledger.generation += 1;
        }
    }

    /// Writes what is typed and stops the ledger's thread once it has saved: what could not be
    /// saved, if anything (call it when the window closes).
    pub fn close_ledger(&mut self) -> Option<Unsaved> {
        self.commit_note();
        let store = self.ledger.store.take()?;
        self.ledger.generation += 1;
        store.close()
    }

    /// Makes a change to the ledger for the image at `image`; a note says why when it cannot be.
    fn change(&mut self, image: &Path, edit: Edit) -> bool {
        match self.ledger.key_of(image) {
            Ok(k) => self.change_key(k, edit),
            Err(why) => {
                self.note(NoteKind::Warning, format!("{} is not in the ledger: {why}", short_name(image)));
                false
            }
        }
    }

    fn change_key(&mut self, key: String, edit: Edit) -> bool {
        let Some(store) = self.ledger.store.as_mut() else { return false };
        match store.change(Change::now(key, edit)) {
            Ok(()) => {
                self.ledger.generation += 1;
                true
            }
            Err(e) => {
                self.note(NoteKind::Error, format!("{e:#}"));
                false
            }
        }
    }

    /// Accepts the sweep's recurring hotspot `id` as a mark: every image of it that lies under
    /// the ledger's root gets the verdict marked and the hotspot's box drawn (each change saved
    /// at once, as the keys 1–4 are).
    pub fn accept_cluster(&mut self, id: usize) {
        let Some(r) = self.sweep.result.clone() else { return };
        let Some((c, _)) = r.recurring.iter().find(|(c, _)| c.id == id) else { return };
        let Some(l) = self.ledger.ledger() else {
            self.note(NoteKind::Warning, "open a ledger first (the ledger section): the cluster's verdicts go there");
            return;
        };
        let (changes, outside) = crate::sweep::accept_cluster(l, c, &r.images_root);
        let saved = changes.into_iter().filter(|ch| self.change_key(ch.image.clone(), ch.edit.clone())).count();
        let left = if outside.is_empty() { String::new() } else { format!("; {} outside the ledger's folder left alone", outside.len()) };
        self.note(NoteKind::Info, format!("recurring hotspot {id}: {} image(s) marked, {saved} change(s){left}", c.images - outside.len()));
    }

    /// Sets the verdict of the image at `image` (`None` clears it).
    pub fn set_verdict(&mut self, image: &Path, verdict: Option<Verdict>) {
        if self.ledger.verdict_of(image) == verdict {
            return;
        }
        if self.change(image, Edit::Verdict(verdict)) {
            let said = verdict.map_or("no verdict".to_string(), |v| format!("verdict {v}"));
            self.note(NoteKind::Info, format!("{}: {said}", short_name(image)));
        }
    }

    /// Writes the note being typed, if it differs from the ledger's.
    pub(crate) fn commit_note(&mut self) {
        let Some((key, text)) = self.ledger.note_draft.take() else { return };
        let Some(l) = self.ledger.ledger() else { return };
        if l.entry(&key).map_or("", |e| e.note.as_str()) == text {
            return;
        }
        self.change_key(key, Edit::Note(text));
    }

    /// Adds a drawn region to the image at `image` of `size` (`[width, height]`).
    pub fn add_drawn(&mut self, image: &Path, shape: DrawnShape, size: [usize; 2]) {
        if let Some(old) = self.ledger.entry_of(image).and_then(|e| e.image_size).filter(|s| *s != size) {
            let n = self.ledger.drawn_of(image).shapes().len();
            self.note(
                NoteKind::Warning,
                format!("the {n} region(s) drawn before were made on a {}×{} image and are replaced: this one is {}×{}", old[0], old[1], size[0], size[1]),
            );
        }
        self.change(image, Edit::AddDrawn { shapes: vec![shape], image_size: Some(size) });
    }

    /// Deletes the `index`th drawn region of the image at `image`.
    pub fn delete_drawn(&mut self, image: &Path, index: usize) {
        let Some(e) = self.ledger.entry_of(image).cloned() else { return };
        if index >= e.drawn.len() {
            return;
        }
        let mut shapes = e.drawn;
        shapes.remove(index);
        self.change(image, Edit::SetDrawn { image_size: e.image_size.filter(|_| !shapes.is_empty()), shapes });
    }

    /// The image keys 1–4 give a verdict to: the one on the slide (a sweep row clicked is
    /// opened there).
    pub fn verdict_target(&self) -> Option<PathBuf> {
        self.current_image().map(|e| e.path.clone())
    }

    /// The ledger a newly opened folder or image belongs to, when none was chosen: the nearest
    /// `spurion-ledger.json` in that folder or above it (an image opened from inside a dataset
    /// finds the dataset's ledger), else a new one in that folder.
    pub(crate) fn default_ledger_for(&mut self, opened: &Path) {
        if self.ledger.path.is_some() {
            return;
        }
        let opened = std::path::absolute(opened).unwrap_or_else(|_| opened.to_path_buf());
        let folder = if opened.is_dir() { opened } else { opened.parent().map(Path::to_path_buf).unwrap_or_default() };
        if folder.as_os_str().is_empty() {
            return;
        }
        let existing = folder.ancestors().find(|d| d.join(crate::ledger::DEFAULT_NAME).is_file()).map(Path::to_path_buf);
        self.open_ledger(&existing.unwrap_or(folder), None);
    }
}
