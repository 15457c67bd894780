//! Worker threads: everything slow (loading a model, opening an image, a reading, the agreement
//! figures, file dialogs, writing exports) runs here and reports back over one channel.
//!
//! Each job gets a thread of its own; the engine parallelises inside a job. The frame polls the
//! channel with `try_recv` and never blocks; each worker asks for a repaint when it sends, and the
//! job's [`Control`] asks for one whenever progress moves, so the progress bar stays live without
//! the UI spinning.

use std::path::PathBuf;
use std::sync::mpsc::{Receiver, Sender, channel};
use std::time::Duration;

use crate::control::Control;
use crate::methods::agree::Agreement;

use super::state::{AgreementKey, JobId, Key, Prepared, Session, Shown};

/// What a finished job sends back.
pub enum Done {
    Model { path: PathBuf, result: Result<Session, String> },
    Image { path: PathBuf, result: Result<Prepared, String> },
    Reading { key: Key, result: Result<Shown, String>, cancelled: bool },
    Agreement { key: AgreementKey, result: Agreement },
    Picked { purpose: Pick, paths: Option<Vec<PathBuf>>, took: Duration },
    Exported { result: Result<Vec<PathBuf>, String> },
    /// A DICOM picture drawn through a display window (`key` names the window).
    Display { path: PathBuf, key: String, result: Result<egui::ColorImage, String> },
    /// The review panel's and the strip curves' jobs (src/gui/review/mod.rs).
    Review(super::review::ReviewDone),
    /// A ledger opened (read) on a worker, ready to be kept by its own saving thread.
    Ledger { path: PathBuf, result: Result<crate::ledger::Store, String> },
    /// A sweep run here or read back from its files (`id` tells which start it answers).
    Sweep { id: u64, result: Result<super::sweep::SweepDone, String>, cancelled: bool },
    /// The sweep view's cleaning of the marked images.
    Clean { result: Result<super::sweep::clean_work::CleanDone, String>, cancelled: bool },
    /// One thumbnail of the sweep `sweep`'s table.
    Thumb { sweep: u64, rel: String, result: Result<egui::ColorImage, String> },
    /// A job that sent its results through its outbox has ended.
    Finished,
    /// A job with nothing of its own to report failed (the text says what failed).
    Failed(String),
}

/// Why a file dialog was opened (decides what is done with its answer).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Pick {
    Model,
    Images,
    Folder,
    CustomBaseline,
    MeanFolder,
    DrawsFolder,
    ExportFolder,
    Ledger,
    SweepImages,
    SweepOut,
}

impl Pick {
    pub fn title(self) -> &'static str {
        match self {
            Pick::Model => "Open an ONNX model",
            Pick::Images => "Open images",
            Pick::Folder => "Open a folder of images",
            Pick::CustomBaseline => "Choose the custom baseline image",
            Pick::MeanFolder => "Choose the folder for the dataset mean",
            Pick::DrawsFolder => "Choose the folder expected gradients draw baselines from",
            Pick::ExportFolder => "Choose where exports go",
            Pick::Ledger => "Choose the ledger file, or the folder it is in",
            Pick::SweepImages => "Choose the folder of images to sweep",
            Pick::SweepOut => "Choose where the sweep's files and cache go",
        }
    }
}

/// Lets a job send results before it ends (the strip sends each map as it is read).
pub struct Outbox {
    id: JobId,
    tx: Sender<(JobId, Done, bool)>,
    ctx: egui::Context,
}

impl Outbox {
    pub fn send(&self, done: Done) {
        // The receiver is gone only when the inspector is closing; nothing to tell then.
        self.tx.send((self.id, done, false)).ok();
        self.ctx.request_repaint();
    }
}

/// A job still running, for the progress list.
pub struct Running {
    pub id: JobId,
    pub label: String,
    pub ctl: Control,
    /// Readings are cancellable; dialogs and exports are not worth it.
    pub cancellable: bool,
}

/// The job list and the channel results come back on.
pub struct Workers {
    tx: Sender<(JobId, Done, bool)>,
    rx: Receiver<(JobId, Done, bool)>,
    next: JobId,
    pub running: Vec<Running>,
    repaint: egui::Context,
}

impl Workers {
    pub fn new(repaint: egui::Context) -> Workers {
        let (tx, rx) = channel();
        Workers { tx, rx, next: 1, running: Vec::new(), repaint }
    }

    /// Starts `job` on its own thread; it gets a fresh [`Control`] wired to repaint the UI. If the
    /// job panics, what `on_panic` makes of the panic's message is sent in its place, once (a
    /// reading that panics is a failed reading, not asked for again).
    pub fn spawn(
        &mut self,
        label: impl Into<String>,
        cancellable: bool,
        job: impl FnOnce(&Control, &Outbox) -> Done + Send + 'static,
        on_panic: impl FnOnce(String) -> Done + Send + 'static,
    ) -> (JobId, Control) {
        let id = self.next;
        self.next += 1;
        let ctx = self.repaint.clone();
        let ctl = Control::with_callback(move |_, _| ctx.request_repaint_after(Duration::from_millis(30)));
        let tx = self.tx.clone();
        let ctx = self.repaint.clone();
        let c = ctl.clone();
        let label = label.into();
        let outbox = Outbox { id, tx: self.tx.clone(), ctx: self.repaint.clone() };
        std::thread::Builder::new()
            .name(format!("spurion-job-{id}"))
            .spawn(move || {
                // A panic in the engine must not take the window down: report it as a failure.
                let done = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| job(&c, &outbox)));
                let done = done.unwrap_or_else(|p| {
                    let msg = p
                        .downcast_ref::<String>()
                        .cloned()
                        .or_else(|| p.downcast_ref::<&str>().map(|s| s.to_string()))
                        .unwrap_or_else(|| "unknown".into());
                    on_panic(format!("internal error (please report): {msg}"))
                });
                // The receiver is gone only when the inspector is closing; nothing to tell then.
                tx.send((id, done, true)).ok();
                ctx.request_repaint();
            })
            .expect("the system refused to start a thread");
        self.running.push(Running { id, label, ctl: ctl.clone(), cancellable });
        (id, ctl)
    }

    pub fn set_repaint(&mut self, ctx: &egui::Context) {
        self.repaint = ctx.clone();
    }

    /// Everything finished since the last call (never blocks).
    pub fn finished(&mut self) -> Vec<(JobId, Done)> {
        let mut out = Vec::new();
        while let Ok((id, done, last)) = self.rx.try_recv() {
            if last {
                self.running.retain(|r| r.id != id);
            }
            out.push((id, done));
        }
        out
    }

    pub fn cancel(&self, id: JobId) {
        if let Some(r) = self.running.iter().find(|r| r.id == id) {
            r.ctl.cancel();
        }
    }

    pub fn is_running(&self, id: JobId) -> bool {
        self.running.iter().any(|r| r.id == id)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_job_that_panics_reports_once_what_on_panic_makes_of_it() {
        let mut w = Workers::new(egui::Context::default());
        let (id, _) = w.spawn("doomed", false, |_, _| panic!("the engine fell over"), |msg| Done::Failed(msg));
        let started = std::time::Instant::now();
        let mut got = vec![];
        while w.is_running(id) {
            got.extend(w.finished());
            assert!(started.elapsed() < Duration::from_secs(10), "the job never ended");
            std::thread::sleep(Duration::from_millis(5));
        }
        got.extend(w.finished());
        assert_eq!(got.len(), 1, "one report, not one per frame");
        match &got[0].1 {
            Done::Failed(m) => assert!(m.contains("the engine fell over") && m.contains("internal error"), "{m}"),
            _ => panic!("the panic was not reported as a failure"),
        }
    }
}
