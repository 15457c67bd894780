//! The inspector: owns the state, draws the panels, applies their intents, runs jobs.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::{Duration, Instant};

use egui::TextureHandle;
use ndarray::Array2;

use crate::methods::agree::{self, Sign};

use super::form::Form;
use super::paint;
use super::panels;
use super::recent::{self, Recent};
use super::state::*;
use super::work::{Done, Pick, Workers};
use super::{GuiOptions, default_inputs, short_name};

/// Where the inspector keeps its small files, and how it behaves on start.
#[derive(Clone, Debug)]
pub struct InspectorConfig {
    /// The recent-files list (None: not remembered).
    pub recent_file: Option<PathBuf>,
    /// Start a reading as soon as the image and model are ready (and whenever settings change).
    pub auto_read: bool,
    /// Use rfd dialogs (off in headless tests: no desktop to show them on).
    pub dialogs: bool,
    /// Fill the baseline strip once the first reading is in (for the README screenshot).
    pub strip_on_start: bool,
    /// Write UI pass times (median, p90, max) to this file every 100 frames.
    pub frame_log: Option<PathBuf>,
}

impl InspectorConfig {
    pub fn for_desktop() -> InspectorConfig {
        InspectorConfig {
            recent_file: recent::default_file(),
            auto_read: true,
            dialogs: true,
            strip_on_start: std::env::var_os("SPURION_INSPECTOR_STRIP").is_some_and(|v| v != "0"),
            frame_log: std::env::var_os("SPURION_FRAME_LOG").map(PathBuf::from),
        }
    }

    /// No dialogs, recent files in `dir` (tests and benchmarks).
    pub fn headless(dir: &Path) -> InspectorConfig {
        InspectorConfig {
            recent_file: Some(dir.join("recent.json")),
            auto_read: true,
            dialogs: false,
            strip_on_start: false,
            frame_log: None,
        }
    }
}

/// What the panels ask for; applied after drawing, so a panel never changes state under another.
#[derive(Clone, Debug)]
pub enum Intent {
    OpenModel(PathBuf),
    /// Images, folders, or a mix; an `.onnx` among them opens as the model.
    OpenPaths(Vec<PathBuf>),
    /// Open whatever is typed in the path field.
    OpenTyped,
    Pick(Pick),
    Select(usize),
    Cancel(JobId),
    ComputeStrip,
    Export(ExportWhat),
    About(bool),
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ExportWhat {
    View,
    Strip,
    Json,
}

/// Texture caches, keyed by what they show.
#[derive(Default)]
pub(crate) struct Textures {
    pub base: HashMap<PathBuf, TextureHandle>,
    pub layer: Option<(LayerKey, TextureHandle)>,
    pub contour: Option<(LayerKey, Vec<[[f32; 2]; 2]>)>,
    pub tiles: HashMap<(Key, &'static str, u32), TextureHandle>,
    pub legend: HashMap<&'static str, TextureHandle>,
    /// Colour-scale end per (reading, sign).
    pub scale: HashMap<Key, f32>,
}

#[derive(Clone, Debug, PartialEq)]
pub(crate) struct LayerKey {
    pub key: Key,
    pub sign: Sign,
    pub overlay: Overlay,
    pub share_permille: u32,
}

pub struct Inspector {
    pub config: InspectorConfig,
    pub session: Option<Arc<Session>>,
    pub model_path: Option<PathBuf>,
    pub model_job: Option<JobId>,
    pub model_error: Option<String>,
    pub images: Vec<ImageEntry>,
    pub selected: Option<usize>,
    pub form: Form,
    pub view: ViewSettings,
    pub cache: ReadingCache,
    pub strip: StripState,
    pub workers: Workers,
    pub notes: Vec<Note>,
    pub recent: Recent,
    pub path_field: String,
    pub export_dir: String,
    pub show_about: bool,
    /// The slide's reading job, and the key it computes.
    pub slide_job: Option<(Key, JobId)>,
    pub strip_job: Option<JobId>,
    pub(crate) tex: Textures,
    /// Why the current request cannot be made (bad form field), shown under the controls.
    pub form_problem: Option<String>,
    pub ctx: egui::Context,
    /// Durations of the last frames' UI work (for the frame-time bench).
    pub frame_log: Vec<Duration>,
    pub log_frames: bool,
}

impl Inspector {
    pub fn new(ctx: egui::Context, opts: GuiOptions, config: InspectorConfig) -> Inspector {
        let (recent, recent_note) = match &config.recent_file {
            Some(f) => Recent::load(f),
            None => (Recent::default(), None),
        };
        let mut app = Inspector {
            config,
            session: None,
            model_path: None,
            model_job: None,
            model_error: None,
            images: Vec::new(),
            selected: None,
            form: Form::default(),
            view: ViewSettings::default(),
            cache: ReadingCache::default(),
            strip: StripState::default(),
            workers: Workers::new(ctx.clone()),
            notes: Vec::new(),
            recent,
            path_field: String::new(),
            export_dir: default_export_dir().display().to_string(),
            show_about: false,
            slide_job: None,
            strip_job: None,
            tex: Textures::default(),
            form_problem: None,
            ctx,
            frame_log: Vec::new(),
            log_frames: false,
        };
        // First-run status line: the caution, until something else is said.
        app.note(NoteKind::Info, crate::CAUTION);
        if let Some(n) = recent_note {
            app.note(NoteKind::Warning, n);
        }
        let (model, paths, first) = if opts.model.is_none() && opts.paths.is_empty() {
            let d = default_inputs();
            if d.model.is_none() {
                app.note(
                    NoteKind::Warning,
                    "the sample model sample-models/shortcut.onnx was not found next to the program or in \
                     the current folder; open a model with \"Model…\", the path field, or by dropping an .onnx file",
                );
            }
            (d.model, d.paths, d.first)
        } else {
            (opts.model, opts.paths, None)
        };
        if let Some(m) = model {
            app.open_model(&m);
        }
        if !paths.is_empty() {
            app.open_paths(&paths);
        }
        if let Some(f) = first {
            app.select_path(&f);
        }
        app
    }

    pub fn note(&mut self, kind: NoteKind, text: impl Into<String>) {
        self.notes.push(Note { text: text.into(), kind });
        if self.notes.len() > 50 {
            self.notes.remove(0);
        }
    }

    // ---------------------------------------------------------------- opening

    pub fn open_model(&mut self, path: &Path) {
        if let Some(id) = self.model_job.take() {
            self.workers.cancel(id);
        }
        let p = path.to_path_buf();
        let (id, _) = self.workers.spawn(format!("loading model {}", short_name(path)), false, move |_ctl, _| {
            let result = super::engine::load_session(&p).map_err(|e| format!("{e:#}"));
            Done::Model { path: p, result }
        });
        self.model_job = Some(id);
        self.model_path = Some(path.to_path_buf());
        self.model_error = None;
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
                match crate::feed::list_images(p) {
                    Ok(list) if list.is_empty() => self.note(
                        NoteKind::Warning,
                        format!("{} holds no PNG, JPEG, TIFF or BMP images", p.display()),
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
        match self.images.iter().position(|e| e.path == path) {
            Some(i) => {
                self.select(i);
                true
            }
            None => false,
        }
    }

    /// The list position of `path`, added if it is not there yet (and whether it was added).
    fn push_image(&mut self, path: PathBuf) -> (usize, bool) {
        if let Some(i) = self.images.iter().position(|e| e.path == path) {
            return (i, false);
        }
        self.images.push(ImageEntry { path, state: ImageState::NotOpened });
        (self.images.len() - 1, true)
    }

    fn save_recent(&mut self) {
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

    fn ensure_prepared(&mut self, i: usize) {
        let Some(session) = self.session.clone() else { return };
        let e = &mut self.images[i];
        if !matches!(e.state, ImageState::NotOpened) {
            return;
        }
        e.state = ImageState::Opening;
        let p = e.path.clone();
        self.workers.spawn(format!("opening {}", short_name(&p)), false, move |_ctl, _| {
            let result = super::engine::prepare(&session, &p).map_err(|e| format!("{e:#}"));
            Done::Image { path: p, result }
        });
    }

    // ---------------------------------------------------------------- the current reading

    pub fn current_image(&self) -> Option<&ImageEntry> {
        self.selected.and_then(|i| self.images.get(i))
    }

    pub fn current_prepared(&self) -> Option<Arc<Prepared>> {
        match &self.current_image()?.state {
            ImageState::Ready(p) => Some(p.clone()),
            _ => None,
        }
    }

    fn image_dir(&self) -> Option<PathBuf> {
        self.current_image().and_then(|e| e.path.parent().map(|p| p.to_path_buf()))
    }

    /// The key the slide wants to show now, or why there is none.
    pub fn wanted_key(&self) -> Result<Key, String> {
        let img = self.current_image().ok_or("no image selected")?;
        let ask = self.form.ask(self.image_dir().as_deref())?;
        Ok(Key { image: img.path.clone(), ask })
    }

    pub fn current_shown(&self) -> Option<(Key, Arc<Shown>)> {
        let k = self.wanted_key().ok()?;
        let s = self.cache.done(&k)?.clone();
        Some((k, s))
    }

    /// Starts a reading for `key` unless it is cached or already running.
    fn request(&mut self, key: &Key, for_slide: bool) -> Option<JobId> {
        if let Some(slot) = self.cache.slots.get(key) {
            return match slot {
                Slot::Pending(id) => Some(*id),
                _ => None,
            };
        }
        let session = self.session.clone()?;
        let prepared = self.images.iter().find(|e| e.path == key.image).and_then(|e| match &e.state {
            ImageState::Ready(p) => Some(p.clone()),
            _ => None,
        })?;
        let k = key.clone();
        let label = format!("{} · {}", short_name(&key.image), key.ask.describe());
        let (id, _) = self.workers.spawn(label, true, move |ctl, _| {
            let r = super::engine::read(&session, &prepared, &k.ask, ctl);
            let cancelled = r.as_ref().err().is_some_and(crate::model::is_cancelled) || ctl.is_cancelled();
            Done::Reading { key: k, result: r.map_err(|e| format!("{e:#}")), cancelled }
        });
        self.cache.slots.insert(key.clone(), Slot::Pending(id));
        if for_slide {
            self.slide_job = Some((key.clone(), id));
        }
        Some(id)
    }

    /// Keeps the slide's reading in step with the selection and the form.
    fn sync_slide(&mut self) {
        let wanted = self.wanted_key();
        self.form_problem = wanted.as_ref().err().cloned().filter(|_| self.current_image().is_some());
        let Ok(key) = wanted else { return };
        // A slide job for a key nobody wants any more is stopped, so its cores go to the new one.
        if let Some((k, id)) = self.slide_job.clone()
            && k != key
        {
            let strip_needs = self.strip.wanted.as_ref().is_some_and(|p| p.keys().contains(&k));
            if !strip_needs && self.workers.is_running(id) {
                self.workers.cancel(id);
            }
            self.slide_job = None;
        }
        if self.config.auto_read && self.cache.slots.get(&key).is_none() {
            self.request(&key, true);
        }
    }

    /// Starts the strip for the current image and settings.
    pub fn compute_strip(&mut self) {
        let Some(img_path) = self.current_image().map(|e| e.path.clone()) else {
            self.note(NoteKind::Warning, "open an image first");
            return;
        };
        if !self.form.method.takes_baseline() {
            self.note(
                NoteKind::Warning,
                format!(
                    "the baseline strip compares baselines, and {} takes none; choose integrated gradients or occlusion",
                    self.form.method.name()
                ),
            );
            return;
        }
        let plan = StripPlan::new(&img_path, &self.form, self.image_dir().as_deref());
        self.strip.wanted = Some(plan.clone());
        if let Some(id) = self.strip_job.take() {
            self.workers.cancel(id);
        }
        // One job reads the missing baselines in turn, so the strip never takes more than its
        // share of the cores from the slide.
        let missing: Vec<Key> = plan.keys().into_iter().filter(|k| !self.cache.slots.contains_key(k)).collect();
        if missing.is_empty() {
            return;
        }
        let (Some(session), Some(prepared)) = (self.session.clone(), self.current_prepared()) else {
            self.note(NoteKind::Warning, "the strip starts once the model and image are ready");
            return;
        };
        let keys = missing.clone();
        let (id, _) = self.workers.spawn(format!("baseline strip · {} maps", keys.len()), true, move |ctl, outbox| {
            let mut last = None;
            for k in keys {
                if ctl.is_cancelled() {
                    break;
                }
                let r = super::engine::read(&session, &prepared, &k.ask, ctl);
                let cancelled = r.as_ref().err().is_some_and(crate::model::is_cancelled) || ctl.is_cancelled();
                let d = Done::Reading { key: k, result: r.map_err(|e| format!("{e:#}")), cancelled };
                if let Some(prev) = last.replace(d) {
                    outbox.send(prev);
                }
            }
            last.unwrap_or(Done::Exported { result: Ok(vec![]) })
        });
        for k in missing {
            self.cache.slots.insert(k, Slot::Pending(id));
        }
        self.strip_job = Some(id);
    }

    /// Starts the agreement job once every map of the wanted strip is read.
    fn sync_agreement(&mut self) {
        let Some(plan) = &self.strip.wanted else { return };
        let keys = plan.keys();
        if keys.len() < 2 {
            return;
        }
        let maps: Option<Vec<Arc<Shown>>> = keys.iter().map(|k| self.cache.done(k).cloned()).collect();
        let Some(maps) = maps else { return };
        let akey = AgreementKey {
            keys: keys.clone(),
            sign: self.view.sign.name(),
            share_permille: (self.view.top_share * 1000.0).round() as u32,
        };
        if self.strip.agreement.contains_key(&akey) {
            return;
        }
        self.strip.agreement.insert(akey.clone(), AgreementSlot::Pending);
        let (sign, share) = (self.view.sign, self.view.top_share);
        let k = akey.clone();
        self.workers.spawn("agreement figures", false, move |_ctl, _| {
            let refs: Vec<&Array2<f32>> = maps.iter().map(|s| &s.map).collect();
            Done::Agreement { key: k, result: agree::agreement(&refs, sign, share) }
        });
    }

    /// The agreement of the wanted strip under the current sign and share, if computed.
    pub fn current_agreement(&self) -> Option<Arc<agree::Agreement>> {
        let plan = self.strip.wanted.as_ref()?;
        let akey = AgreementKey {
            keys: plan.keys(),
            sign: self.view.sign.name(),
            share_permille: (self.view.top_share * 1000.0).round() as u32,
        };
        match self.strip.agreement.get(&akey)? {
            AgreementSlot::Done(a) => Some(a.clone()),
            AgreementSlot::Pending => None,
        }
    }

    // ---------------------------------------------------------------- results

    fn take_results(&mut self) {
        for (id, done) in self.workers.finished() {
            match done {
                Done::Model { path, result } => {
                    if self.model_job != Some(id) {
                        continue;
                    }
                    self.model_job = None;
                    match result {
                        Ok(s) => {
                            self.note(
                                NoteKind::Info,
                                format!("model {} loaded ({}; {} outputs)", short_name(&path), s.card_note, s.labels.len()),
                            );
                            self.recent.add_model(&path);
                            self.save_recent();
                            self.session = Some(Arc::new(s));
                            // Scores, readings and textures belong to the old model.
                            self.cache = ReadingCache::default();
                            self.strip = StripState { per_map_scale: self.strip.per_map_scale, ..Default::default() };
                            self.tex.layer = None;
                            self.tex.contour = None;
                            self.tex.tiles.clear();
                            self.tex.scale.clear();
                            for e in &mut self.images {
                                e.state = ImageState::NotOpened;
                            }
                            if let Some(i) = self.selected {
                                self.ensure_prepared(i);
                            }
                        }
                        Err(e) => {
                            self.note(NoteKind::Error, e.clone());
                            self.model_error = Some(e);
                        }
                    }
                }
                Done::Image { path, result } => {
                    if let Some(e) = self.images.iter_mut().find(|e| e.path == path) {
                        e.state = match result {
                            Ok(p) => ImageState::Ready(Arc::new(p)),
                            Err(msg) => ImageState::Failed(msg),
                        };
                    }
                }
                Done::Reading { key, result, cancelled } => {
                    if self.slide_job.as_ref().is_some_and(|(_, j)| *j == id) {
                        self.slide_job = None;
                    }
                    if cancelled {
                        self.cache.slots.remove(&key);
                        continue;
                    }
                    match result {
                        Ok(s) => {
                            self.cache.slots.insert(key, Slot::Done(Arc::new(s)));
                        }
                        Err(e) => {
                            self.note(NoteKind::Error, format!("{}: {e}", short_name(&key.image)));
                            self.cache.slots.insert(key, Slot::Failed(e));
                        }
                    }
                }
                Done::Agreement { key, result } => {
                    self.strip.agreement.insert(key, AgreementSlot::Done(Arc::new(result)));
                }
                Done::Picked { purpose, paths, took } => self.picked(purpose, paths, took),
                Done::Exported { result } => match result {
                    Ok(files) if files.is_empty() => {}
                    Ok(files) => {
                        let list: Vec<String> = files.iter().map(|f| f.display().to_string()).collect();
                        self.note(NoteKind::Info, format!("written: {}", list.join(", ")));
                    }
                    Err(e) => self.note(NoteKind::Error, e),
                },
            }
            if self.strip_job == Some(id) && !self.workers.is_running(id) {
                self.strip_job = None;
                // Keys the cancelled strip job never reached are pending no more.
                self.cache.slots.retain(|_, s| !matches!(s, Slot::Pending(j) if *j == id));
            }
        }
        // Keys a finished or cancelled job left pending (cancel before start) are dropped.
        let running: Vec<JobId> = self.workers.running.iter().map(|r| r.id).collect();
        self.cache.slots.retain(|_, s| !matches!(s, Slot::Pending(j) if !running.contains(j)));
    }

    fn picked(&mut self, purpose: Pick, paths: Option<Vec<PathBuf>>, took: Duration) {
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
            Pick::ExportFolder => self.export_dir = paths[0].display().to_string(),
        }
    }

    // ---------------------------------------------------------------- intents

    fn apply(&mut self, intents: Vec<Intent>) {
        for i in intents {
            match i {
                Intent::OpenModel(p) => self.open_model(&p),
                Intent::OpenPaths(ps) => self.open_paths(&ps),
                Intent::OpenTyped => {
                    let t = self.path_field.trim().to_string();
                    if t.is_empty() {
                        self.note(NoteKind::Warning, "type a model, image or folder path first");
                    } else {
                        self.open_paths(&[PathBuf::from(t)]);
                    }
                }
                Intent::Pick(what) => self.pick(what),
                Intent::Select(i) => self.select(i),
                Intent::Cancel(id) => self.workers.cancel(id),
                Intent::ComputeStrip => self.compute_strip(),
                Intent::Export(what) => self.export(what),
                Intent::About(show) => self.show_about = show,
            }
        }
    }

    fn pick(&mut self, what: Pick) {
        if !self.config.dialogs {
            self.picked(what, None, Duration::ZERO);
            return;
        }
        let start_dir = self.image_dir();
        self.workers.spawn(format!("dialog: {}", what.title()), false, move |_ctl, _| {
            let started = Instant::now();
            let mut d = rfd::FileDialog::new().set_title(what.title());
            if let Some(dir) = &start_dir {
                d = d.set_directory(dir);
            }
            let paths = match what {
                Pick::Model => d.add_filter("ONNX model", &["onnx"]).pick_file().map(|p| vec![p]),
                Pick::Images => d.add_filter("images", crate::feed::IMAGE_ENDINGS).pick_files(),
                Pick::CustomBaseline => d.add_filter("images", crate::feed::IMAGE_ENDINGS).pick_file().map(|p| vec![p]),
                Pick::Folder | Pick::MeanFolder | Pick::ExportFolder => d.pick_folder().map(|p| vec![p]),
            };
            Done::Picked { purpose: what, paths, took: started.elapsed() }
        });
    }

    fn export(&mut self, what: ExportWhat) {
        match super::export::plan(self, what) {
            Ok(job) => {
                self.workers.spawn("writing export", false, move |_ctl, _| Done::Exported {
                    result: job.write().map_err(|e| format!("export failed: {e:#}")),
                });
            }
            Err(e) => self.note(NoteKind::Warning, e),
        }
    }

    // ---------------------------------------------------------------- frame

    /// One frame: take results, draw every panel, apply what they asked for, start what is due.
    pub fn frame(&mut self, ui: &mut egui::Ui) {
        let t0 = Instant::now();
        // The context is the window's (or a test harness's): textures and repaints go there.
        self.ctx = ui.ctx().clone();
        self.workers.set_repaint(ui.ctx());
        self.take_results();
        let mut intents = Vec::new();

        // Dropped files open like typed paths.
        let dropped: Vec<PathBuf> = ui.input(|i| i.raw.dropped_files.iter().map(|f| f.path().to_path_buf()).collect());
        if !dropped.is_empty() {
            intents.push(Intent::OpenPaths(dropped));
        }

        panels::top_bar(ui, self, &mut intents);
        panels::status_bar(ui, self, &mut intents);
        panels::strip_panel(ui, self, &mut intents);
        panels::image_list(ui, self, &mut intents);
        panels::controls(ui, self, &mut intents);
        panels::slide(ui, self, &mut intents);
        panels::about(ui, self, &mut intents);
        panels::drop_hint(ui);

        self.apply(intents);
        self.sync_slide();
        if self.config.strip_on_start && self.current_shown().is_some() {
            self.config.strip_on_start = false;
            self.compute_strip();
        }
        self.sync_agreement();
        if self.log_frames || self.config.frame_log.is_some() {
            self.frame_log.push(t0.elapsed());
            if let Some(f) = &self.config.frame_log
                && self.frame_log.len() % 100 == 0
            {
                let _ = std::fs::write(f, frame_stats(&self.frame_log, self.busy()));
            }
        }
    }

    // ---------------------------------------------------------------- textures

    pub(crate) fn base_texture(&mut self, path: &Path, prepared: &Prepared) -> TextureHandle {
        if let Some(t) = self.tex.base.get(path) {
            return t.clone();
        }
        let t = self.ctx.load_texture(
            format!("picture {}", path.display()),
            prepared.base_image.clone(),
            egui::TextureOptions::NEAREST,
        );
        self.tex.base.insert(path.to_path_buf(), t.clone());
        t
    }

    /// Colour-scale end of a reading (the render module's robust scale of the signed map).
    pub(crate) fn scale_of(&mut self, key: &Key, shown: &Shown) -> f32 {
        *self.tex.scale.entry(key.clone()).or_insert_with(|| crate::render::robust_scale(&shown.map))
    }

    pub(crate) fn layer_texture(&mut self, lk: &LayerKey, shown: &Shown, scale: f32) -> Option<TextureHandle> {
        if let Some((k, t)) = &self.tex.layer
            && k == lk
        {
            return Some(t.clone());
        }
        let img = match lk.overlay {
            Overlay::Tint => paint::tint_layer(&shown.map, scale, lk.sign),
            Overlay::Reveal => paint::reveal_layer(&agree::top_mask(&agree::view(&shown.map, lk.sign), self.view.top_share)),
            Overlay::Contour | Overlay::Off => return None,
        };
        let t = self.ctx.load_texture("slide layer", img, egui::TextureOptions::NEAREST);
        self.tex.layer = Some((lk.clone(), t.clone()));
        Some(t)
    }

    pub(crate) fn contour_edges(&mut self, lk: &LayerKey, shown: &Shown) -> Vec<[[f32; 2]; 2]> {
        if let Some((k, e)) = &self.tex.contour
            && k == lk
        {
            return e.clone();
        }
        let e = paint::mask_edges(&agree::top_mask(&agree::view(&shown.map, lk.sign), self.view.top_share));
        self.tex.contour = Some((lk.clone(), e.clone()));
        e
    }

    pub(crate) fn tile_texture(&mut self, key: &Key, shown: &Shown, sign: Sign, scale: f32) -> TextureHandle {
        let tk = (key.clone(), sign.name(), scale.to_bits());
        if let Some(t) = self.tex.tiles.get(&tk) {
            return t.clone();
        }
        let t = self.ctx.load_texture("strip tile", paint::tint_layer(&shown.map, scale, sign), egui::TextureOptions::LINEAR);
        self.tex.tiles.insert(tk, t.clone());
        t
    }

    pub(crate) fn legend_texture(&mut self, sign: Sign) -> TextureHandle {
        if let Some(t) = self.tex.legend.get(sign.name()) {
            return t.clone();
        }
        let t = self.ctx.load_texture("legend", paint::legend_ramp(sign, 256), egui::TextureOptions::LINEAR);
        self.tex.legend.insert(sign.name(), t.clone());
        t
    }

    /// True while any job runs (tests and the frame-time bench wait on this).
    pub fn busy(&self) -> bool {
        !self.workers.running.is_empty()
    }
}

/// Whether a file named as an image can be opened as one, judged by its ending (the worker that
/// opens it reports damaged files); `Err` is the note to show: which file, what is wrong, what to do.
pub fn openable_image(p: &Path) -> Result<(), String> {
    let ending = p.extension().map(|e| e.to_string_lossy().to_ascii_lowercase());
    if ending.as_deref().is_some_and(|e| crate::feed::IMAGE_ENDINGS.contains(&e)) {
        return Ok(());
    }
    let what = match ending.as_deref() {
        None => "it has no file ending".to_string(),
        Some("dcm" | "dicom") => "DICOM files are not read directly".to_string(),
        Some(e) => format!("files ending in .{e} are neither images nor models"),
    };
    let todo = if matches!(ending.as_deref(), Some("dcm" | "dicom")) {
        "export the pixel data to PNG first (with no patient fields in the picture) and open that"
    } else {
        "open an .onnx model, a PNG, JPEG, TIFF or BMP image, or a folder of them"
    };
    Err(format!("{} was not opened: {what}; {todo}", p.display()))
}

/// Median, 90th percentile and maximum of UI pass times, as one line of text.
pub fn frame_stats(times: &[Duration], busy: bool) -> String {
    let mut ms: Vec<f64> = times.iter().map(|d| d.as_secs_f64() * 1e3).collect();
    ms.sort_by(f64::total_cmp);
    let at = |q: f64| ms.get(((q * ms.len() as f64) as usize).min(ms.len().saturating_sub(1))).copied().unwrap_or(0.0);
    format!(
        "frames {} · median {:.2} ms · p90 {:.2} ms · max {:.2} ms · jobs running now: {}\n",
        ms.len(),
        at(0.5),
        at(0.9),
        ms.last().copied().unwrap_or(0.0),
        busy
    )
}

impl eframe::App for Inspector {
    fn ui(&mut self, ui: &mut egui::Ui, _frame: &mut eframe::Frame) {
        self.frame(ui);
    }
}
