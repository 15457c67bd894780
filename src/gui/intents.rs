//! What the panels ask for, and how the inspector carries it out after the frame is drawn.

use std::path::PathBuf;
use std::time::{Duration, Instant};

use super::app::Inspector;
use super::slide::export::ExportWhat;
use super::state::{JobId, NoteKind};
use super::sweep::{BottomTab, Column};
use super::work::{Done, Pick};
use crate::ledger::Verdict;
use crate::regions::drawn::DrawnShape;

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
    /// Show or hide the feed window.
    FeedWindow(bool),
    /// Write a feed card beside the model with this preset (an index into `feed::Preset::ALL`)
    /// and labels file, then load the model again with it.
    WriteCard(usize, Option<PathBuf>),
    Review(super::review::ReviewIntent),
    /// Keys 1–4 (0 clears): the verdict of the image on the slide.
    Verdict(Option<Verdict>),
    /// A region drawn on the image at the path, of size `[width, height]`.
    AddDrawn(PathBuf, DrawnShape, [usize; 2]),
    DeleteDrawn(PathBuf, usize),
    /// Open the ledger typed in the ledger section.
    OpenTypedLedger,
    StartSweep,
    /// Show the files of a sweep made earlier into the sweep's folder.
    LoadSweep,
    /// Paint the marks of the shown sweep's suspect images (and the ledger's marked ones) out
    /// into a cleaned copy.
    CleanMarked,
    /// Open the image of this sweep row (an index into the rows) in the slide.
    OpenRow(usize),
    /// Move the slide to the next (+1) or previous (−1) row of the table as it is shown.
    StepRow(i32),
    SortBy(Column),
    Tab(BottomTab),
    /// Accept the sweep's recurring hotspot with this number as a mark, for all its images.
    AcceptCluster(usize),
}

impl Inspector {
    pub(crate) fn apply(&mut self, intents: Vec<Intent>) {
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
                Intent::FeedWindow(show) => self.feed_window.open = show,
                Intent::WriteCard(preset, labels) => self.write_card(preset, labels),
                Intent::Review(r) => self.apply_review(r),
                Intent::Verdict(v) => match self.verdict_target() {
                    Some(p) => self.set_verdict(&p, v),
                    None => self.note(NoteKind::Warning, "open an image first: keys 1–4 give the image on the slide its verdict"),
                },
                Intent::AddDrawn(p, shape, size) => self.add_drawn(&p, shape, size),
                Intent::DeleteDrawn(p, i) => self.delete_drawn(&p, i),
                Intent::OpenTypedLedger => {
                    let t = self.ledger.field.trim().to_string();
                    if t.is_empty() {
                        self.note(NoteKind::Warning, "type the ledger's file or folder first");
                    } else {
                        let dataset = self.image_dir();
                        self.open_ledger(&PathBuf::from(t), dataset.as_deref());
                    }
                }
                Intent::StartSweep => self.start_sweep(),
                Intent::LoadSweep => self.load_sweep(),
                Intent::CleanMarked => self.start_clean(),
                Intent::OpenRow(i) => self.open_row(i),
                Intent::StepRow(d) => self.step_row(d),
                Intent::SortBy(c) => self.sweep.sort_by(c),
                Intent::Tab(t) => self.sweep.tab = t,
                Intent::AcceptCluster(id) => self.accept_cluster(id),
            }
        }
    }

    pub(crate) fn pick(&mut self, what: Pick) {
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
                Pick::Folder | Pick::MeanFolder | Pick::DrawsFolder | Pick::ExportFolder | Pick::SweepImages | Pick::SweepOut => {
                    d.pick_folder().map(|p| vec![p])
                }
                Pick::Ledger => d.add_filter("ledger", &["json"]).pick_file().map(|p| vec![p]),
            };
            Done::Picked { purpose: what, paths, took: started.elapsed() }
        }, |msg| Done::Failed(format!("the file dialog failed: {msg}")));
    }

    pub(crate) fn export(&mut self, what: ExportWhat) {
        match super::slide::export::plan(self, what) {
            Ok(job) => {
                self.workers.spawn(
                    "writing export",
                    false,
                    move |_ctl, _| Done::Exported { result: job.write().map_err(|e| format!("export failed: {e:#}")) },
                    |msg| Done::Failed(format!("export failed: {msg}")),
                );
            }
            Err(e) => self.note(NoteKind::Warning, e),
        }
    }
}
