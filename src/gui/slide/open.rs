//! Opening models, images and folders; the file dialogs and what is done with their answers.

use std::path::{Path, PathBuf};
use std::time::Duration;

use crate::gui::app::Inspector;
use crate::gui::short_name;
use crate::gui::state::{ImageEntry, ImageState, NoteKind};
use crate::gui::work::{Done, Pick};

impl Inspector {
    pub fn open_model(&mut self, path: &Path) {
        if let Some(id) = self.model_job.take() {
            self.workers.cancel(id);
        }
        let (p, q) = (path.to_path_buf(), path.to_path_buf());
        let (id, _) = self.workers.spawn(
            format!("loading model {}", short_name(path)),
            false,
            move |_ctl, _| Done::Model { result: crate::gui::slide::engine::load_session(&p).map_err(|e| format!("{e:#}")), path: p },
            move |msg| Done::Model { path: q, result: Err(msg) },
        );
        self.model_job = Some(id);
        self.model_path = Some(path.to_path_buf());
        self.model_error = None;
    }

    /// Writes a feed card beside the model on a worker, then loads the model again with it (as
    /// opening it does: the readings of the old feed are dropped).
    pub fn write_card(&mut self, preset: usize, labels: Option<PathBuf>) {
        let (Some(session), Some(&preset)) = (self.session.clone(), crate::feed::Preset::ALL.get(preset)) else { return };
        if let Some(id) = self.model_job.take() {
            self.workers.cancel(id);
        }
        let (p, q) = (session.model.path().to_path_buf(), session.model.path().to_path_buf());
        let (id, _) = self.workers.spawn(
            format!("writing the feed card of {}", short_name(&p)),
            false,
            move |_ctl, _| Done::Model { result: crate::gui::slide::engine::write_card(&session, preset, labels).map_err(|e| format!("{e:#}")), path: p },
            move |msg| Done::Model { path: q, result: Err(msg) },
        );
        self.model_job = Some(id);
        self.feed_window.open = false;
    }

    /// Adds images and folders to the list (an `.onnx` among them opens as the model) and shows
    /// the first image named, so a dropped or typed image is the one on the slide. A file that is
    /// neither an image nor a model is refused with a note that says what to do instead.
    pub fn open_paths(&mut self, paths: &[PathBuf]) {
        let mut added = 0usize;
        let mut show: Option<usize> = None;
        for p in paths {
            if p.extension().is_some_and(|e| e.eq_ignore_ascii_case("onnx")) {
                if p.is_file() {
                    self.open_model(p);
                } else {
                    self.note(NoteKind::Error, format!("model {} does not exist; check the path", p.display()));
                }
                continue;
            }
            if p.is_dir() {
                match images_in(p) {
                    Ok(list) if list.is_empty() => self.note(
                        NoteKind::Warning,
                        format!("{} holds no PNG, JPEG, TIFF, BMP or DICOM images, nor do its sub-folders", p.display()),
                    ),
                    Ok(list) => {
                        for f in list {
                            let (i, new) = self.push_image(f);
                            added += new as usize;
                            // A folder already in the list does not move the slide.
                            if new {
                                show.get_or_insert(i);
                            }
                        }
                        self.recent.add_images(p);
                        self.default_ledger_for(p);
                        self.sweep.suggest(p, true);
                    }
                    Err(e) => self.note(NoteKind::Error, format!("{e:#}")),
                }
            } else if p.is_file() {
                if let Err(why) = openable_image(p) {
                    self.note(NoteKind::Error, why);
                    continue;
                }
                let (i, new) = self.push_image(p.clone());
                added += new as usize;
                show.get_or_insert(i);
                self.recent.add_images(p);
                self.default_ledger_for(p);
                if let Some(dir) = p.parent() {
                    self.sweep.suggest(dir, false);
                }
            } else {
                self.note(NoteKind::Error, format!("{} does not exist; check the path", p.display()));
            }
        }
        self.save_recent();
        if added > 0 {
            self.note(NoteKind::Info, format!("{added} image(s) added"));
        }
        if let Some(i) = show
            && self.selected != Some(i)
        {
            self.select(i);
        }
    }

    /// Shows the image at `path` if it is in the list.
    pub fn select_path(&mut self, path: &Path) -> bool {
        let path = std::path::absolute(path).unwrap_or_else(|_| path.to_path_buf());
        match self.images.iter().position(|e| e.path == path) {
            Some(i) => {
                self.select(i);
                true
            }
            None => false,
        }
    }

    /// The list position of `path`, added if it is not there yet (and whether it was added).
    pub(crate) fn push_image(&mut self, path: PathBuf) -> (usize, bool) {
        // One form for every path (a sweep's rows and the ledger name images absolutely), so the
        // same file is never listed twice.
        let path = std::path::absolute(&path).unwrap_or(path);
        if let Some(i) = self.images.iter().position(|e| e.path == path) {
            return (i, false);
        }
        self.images.push(ImageEntry { path, state: ImageState::NotOpened });
        (self.images.len() - 1, true)
    }

    pub(crate) fn save_recent(&mut self) {
        if let Some(f) = self.config.recent_file.clone()
            && let Err(e) = self.recent.save(&f)
        {
            self.note(NoteKind::Warning, format!("recent files not remembered: {e:#}"));
        }
    }

    pub fn select(&mut self, i: usize) {
        if i >= self.images.len() {
            return;
        }
        self.selected = Some(i);
        self.view.zoom = None;
        self.ensure_prepared(i);
    }

    pub(crate) fn ensure_prepared(&mut self, i: usize) {
        let Some(session) = self.session.clone() else { return };
        let e = &mut self.images[i];
        if !matches!(e.state, ImageState::NotOpened) {
            return;
        }
        e.state = ImageState::Opening;
        let p = e.path.clone();
        let q = p.clone();
        self.workers.spawn(
            format!("opening {}", short_name(&p)),
            false,
            move |_ctl, _| Done::Image { result: crate::gui::slide::engine::prepare(&session, &p).map_err(|e| format!("{e:#}")), path: p },
            move |msg| Done::Image { path: q, result: Err(msg) },
        );
    }

    pub(crate) fn picked(&mut self, purpose: Pick, paths: Option<Vec<PathBuf>>, took: Duration) {
        let Some(paths) = paths.filter(|p| !p.is_empty()) else {
            // The portal answers "nothing" both on cancel and when no portal runs at all; a
            // near-instant answer is almost always the latter.
            let why = if took < Duration::from_millis(400) {
                "no file dialog could be shown (this desktop seems to run no xdg-desktop-portal)"
            } else {
                "no file was chosen"
            };
            self.note(
                NoteKind::Warning,
                format!(
                    "{why}. Other ways in: type a path in the \"path\" field at the top and press Open, \
                     pick one under \"Recent\", or drop files and folders onto the window."
                ),
            );
            return;
        };
        match purpose {
            Pick::Model => self.open_model(&paths[0]),
            Pick::Images | Pick::Folder => self.open_paths(&paths),
            Pick::CustomBaseline => self.form.custom_path = paths[0].display().to_string(),
            Pick::MeanFolder => self.form.mean_dir = paths[0].display().to_string(),
            Pick::DrawsFolder => self.form.draws_dir = paths[0].display().to_string(),
            Pick::ExportFolder => self.export_dir = paths[0].display().to_string(),
            Pick::Ledger => {
                let dataset = self.image_dir();
                self.open_ledger(&paths[0], dataset.as_deref());
            }
            Pick::SweepImages => {
                self.sweep.images_field = paths[0].display().to_string();
                self.sweep.out_field = crate::gui::sweep::default_out(&paths[0]).display().to_string();
            }
            Pick::SweepOut => self.sweep.out_field = paths[0].display().to_string(),
        }
    }
}

/// The images of a folder, or, when it holds none, those of its sub-folders (a dataset kept one
/// folder per site or group, as a sweep groups it), sorted by path.
fn images_in(dir: &Path) -> anyhow::Result<Vec<PathBuf>> {
    let here = crate::feed::list_images(dir)?;
    if !here.is_empty() {
        return Ok(here);
    }
    let mut subs: Vec<PathBuf> = std::fs::read_dir(dir)?.filter_map(|e| e.ok().map(|e| e.path())).filter(|p| p.is_dir()).collect();
    subs.sort();
    let mut out = vec![];
    for s in subs {
        out.extend(crate::feed::list_images(&s)?);
    }
    Ok(out)
}

/// Whether a file named as an image can be opened as one, judged by its ending (the worker that
/// opens it reports damaged files); `Err` is the note to show: which file, what is wrong, what to do.
pub fn openable_image(p: &Path) -> Result<(), String> {
    if crate::feed::is_image_file(p) {
        return Ok(());
    }
    let what = match p.extension() {
        None => "it has no file ending and does not hold DICOM".to_string(),
        Some(e) => format!("files ending in .{} are neither images nor models", e.to_string_lossy()),
    };
    Err(format!(
        "{} was not opened: {what}; open an .onnx model, a PNG, JPEG, TIFF, BMP or DICOM image, or a folder of them",
        p.display()
    ))
}
