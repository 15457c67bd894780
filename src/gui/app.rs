//! The inspector: owns the state, draws the panels, applies their intents, runs jobs. The work
//! is spread over the files beside this one: opening files ([`super::slide::open`]), the readings
//! ([`super::slide::readings`]), finished jobs ([`super::slide::results`]), intents ([`super::intents`]) and
//! textures ([`super::slide::textures`]).

use std::path::PathBuf;
use std::sync::Arc;
use std::time::{Duration, Instant};

use super::config::InspectorConfig;
use super::form::Form;
use super::intents::Intent;
use super::sweep::ledger::LedgerState;
use super::sweep::SweepState;
use super::panels;
use super::recent::Recent;
use super::state::*;
use super::slide::textures::Textures;
use super::work::Workers;
use super::{GuiOptions, default_inputs};

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
    pub review: super::review::ReviewState,
    pub workers: Workers,
    pub notes: Vec<Note>,
    pub recent: Recent,
    pub path_field: String,
    pub export_dir: String,
    pub show_about: bool,
    /// The feed window: the feed used and, without a card, writing one.
    pub feed_window: FeedWindow,
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
    pub ledger: LedgerState,
    pub sweep: SweepState,
    /// Counts the sweeps started or read, so that only the last one's answer is taken.
    pub next_sweep: u64,
    pub draw: DrawState,
    /// Where the slide put the picture in the last frame (for drawing, and for tests).
    pub slide_place: Option<SlidePlace>,
    /// The window was asked to close: it closes once the ledger's changes are saved (or the
    /// user, told what is not saved, closes it anyway).
    pub closing: bool,
    /// The window has been fitted to its monitor (once, on the first frame that knows it).
    pub window_fitted: bool,
}

/// The feed window's state: shown or not, the preset chosen, a labels file typed.
#[derive(Clone, Debug, Default)]
pub struct FeedWindow {
    pub open: bool,
    /// An index into `feed::Preset::ALL`.
    pub preset: usize,
    pub labels: String,
}

impl Inspector {
    pub fn new(ctx: egui::Context, opts: GuiOptions, config: InspectorConfig) -> Inspector {
        super::look::fonts(&ctx);
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
            review: Default::default(),
            workers: Workers::new(ctx.clone()),
            notes: Vec::new(),
            recent,
            path_field: String::new(),
            export_dir: default_export_dir().display().to_string(),
            show_about: false,
            feed_window: FeedWindow::default(),
            slide_job: None,
            strip_job: None,
            tex: Textures::default(),
            form_problem: None,
            ctx,
            frame_log: Vec::new(),
            log_frames: false,
            ledger: LedgerState::default(),
            sweep: SweepState::default(),
            next_sweep: 0,
            draw: DrawState::default(),
            slide_place: None,
            closing: false,
            window_fitted: false,
        };
        // First-run status line: the caution, until something else is said.
        app.note(NoteKind::Info, crate::CAUTION);
        if let Some(n) = recent_note {
            app.note(NoteKind::Warning, n);
        }
        if let Some(l) = &opts.ledger {
            app.open_ledger(l, opts.paths.first().map(|p| if p.is_dir() { p.as_path() } else { p.parent().unwrap_or(p) }));
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

    /// One frame: take results, draw every panel, apply what they asked for, start what is due.
    pub fn frame(&mut self, ui: &mut egui::Ui) {
        let t0 = Instant::now();
        // The context is the window's (or a test harness's): textures and repaints go there.
        self.ctx = ui.ctx().clone();
        super::look::fonts(ui.ctx());
        self.workers.set_repaint(ui.ctx());
        self.take_results();
        self.poll_ledger();
        let mut intents = Vec::new();
        self.keys(ui, &mut intents);

        // Dropped files open like typed paths.
        let dropped: Vec<PathBuf> = ui.input(|i| i.raw.dropped_files.iter().map(|f| f.path().to_path_buf()).collect());
        if !dropped.is_empty() {
            intents.push(Intent::OpenPaths(dropped));
        }

        panels::top_bar(ui, self, &mut intents);
        panels::status_bar(ui, self, &mut intents);
        panels::bottom_panel(ui, self, &mut intents);
        panels::image_list(ui, self, &mut intents);
        panels::controls(ui, self, &mut intents);
        // The centre shows the slide, or the review of the slide's reading.
        if self.review.open { panels::review_panel(ui, self, &mut intents) } else { panels::slide(ui, self, &mut intents) }
        panels::about(ui, self, &mut intents);
        panels::feed_window(ui, self, &mut intents);
        panels::unsaved_on_close(ui, self, &mut intents);
        panels::drop_hint(ui);

        self.apply(intents);
        self.sync_slide();
        self.sync_thumbnails();
        self.guard_close(ui);
        self.fit_window(ui);
        if self.config.strip_on_start && self.current_shown().is_some() {
            self.config.strip_on_start = false;
            self.compute_strip();
        }
        self.sync_agreement();
        if self.log_frames || self.config.frame_log.is_some() {
            self.frame_log.push(t0.elapsed());
            if let Some(f) = self.config.frame_log.clone()
                && self.frame_log.len() % 100 == 0
                && let Err(e) = std::fs::write(&f, frame_stats(&self.frame_log, self.busy()))
            {
                self.note(NoteKind::Warning, format!("frame times not written to {}: {e}; logging them stops", f.display()));
                self.config.frame_log = None;
            }
        }
    }

    /// True while any job runs (tests and the frame-time bench wait on this).
    pub fn busy(&self) -> bool {
        !self.workers.running.is_empty()
    }

    /// The keyboard, when no text field has it: 1–4 give the slide's image a verdict, 0 clears
    /// it; ↑ and ↓ step through the sweep's table; Esc stops drawing.
    fn keys(&mut self, ui: &egui::Ui, out: &mut Vec<Intent>) {
        if ui.ctx().text_edit_focused() {
            return;
        }
        let pressed = |k: egui::Key| ui.input(|i| i.key_pressed(k));
        use egui::Key::*;
        for (key, n) in [(Num1, 1), (Num2, 2), (Num3, 3), (Num4, 4)] {
            if pressed(key) {
                out.push(Intent::Verdict(crate::ledger::Verdict::from_key(n)));
            }
        }
        if pressed(Num0) {
            out.push(Intent::Verdict(None));
        }
        if self.sweep.tab == super::sweep::BottomTab::Sweep && self.sweep.result.is_some() {
            if pressed(ArrowDown) {
                out.push(Intent::StepRow(1));
            }
            if pressed(ArrowUp) {
                out.push(Intent::StepRow(-1));
            }
        }
        if pressed(Escape) {
            if self.draw.points.is_empty() {
                self.draw.mode = DrawMode::Off;
            } else {
                self.draw.points.clear();
            }
        }
    }

    /// Once the monitor's size is known, sizes the window to it (`super::window_size_for`), so
    /// that it opens whole on a small screen and roomy on a large one.
    fn fit_window(&mut self, ui: &egui::Ui) {
        if self.window_fitted {
            return;
        }
        let Some(monitor) = ui.input(|i| i.viewport().monitor_size) else { return };
        self.window_fitted = true;
        let size = super::window_size_for(Some(monitor));
        ui.send_viewport_cmd(egui::ViewportCommand::InnerSize(size));
        let corner = ((monitor - size) * 0.5).max(egui::Vec2::ZERO);
        ui.send_viewport_cmd(egui::ViewportCommand::OuterPosition(corner.to_pos2()));
    }

    /// When the window is asked to close: it stays open until the ledger's last changes are
    /// saved; while they cannot be, a window says what is not saved (see `unsaved_on_close`).
    fn guard_close(&mut self, ui: &egui::Ui) {
        if ui.input(|i| i.viewport().close_requested()) && self.ledger.store.is_some() {
            self.commit_note();
            ui.send_viewport_cmd(egui::ViewportCommand::CancelClose);
            self.closing = true;
        }
        if !self.closing {
            return;
        }
        match self.ledger.status() {
            Some(crate::ledger::Status::Saving { .. }) => ui.ctx().request_repaint_after(Duration::from_millis(50)),
            Some(crate::ledger::Status::Unsaved(_)) => {}
            Some(crate::ledger::Status::Saved) | None => {
                self.closing = false;
                match self.close_ledger() {
                    None => ui.send_viewport_cmd(egui::ViewportCommand::Close),
                    Some(u) => self.note(NoteKind::Error, u.message()),
                }
            }
        }
    }
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

    fn on_exit(&mut self) {
        if let Some(u) = self.close_ledger() {
            // The window is gone; the terminal is the last place to say it.
            eprintln!("spurion: {}", u.message());
        }
    }
}

