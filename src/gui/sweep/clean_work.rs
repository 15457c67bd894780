//! The sweep view's "clean the marked images": the images the shown sweep flagged suspect, and
//! the ones the open ledger marks `marked`, painted out into a copy beside the folder
//! (`FOLDER-clean`, or `FOLDER-clean-2` and on when an earlier copy was made with other
//! settings) by the engine's `clean::run`, on a worker with progress and cancel (a cancelled or
//! failed run goes on where it stopped when started again). The cleaned copy of the
//! image on the slide, or else of the first cleaned image, is then opened beside its original.

use std::path::{Path, PathBuf};

use anyhow::Result;

use crate::clean::{self, Job, LedgerRegions, LedgerSource, Limits, Outcome, Source, SweepSource};
use crate::control::Control;
use crate::feed::OpenOptions;
use crate::ledger::Verdict;
use crate::regions::RegionKind;

use crate::gui::app::Inspector;
use crate::gui::short_name;
use crate::gui::state::{JobId, NoteKind};
use crate::gui::work::Done;

/// The cleaning job of the sweep view.
#[derive(Default)]
pub struct CleanState {
    pub job: Option<JobId>,
    pub started: Option<std::time::Instant>,
}

/// What a finished cleaning hands back.
pub struct CleanDone {
    pub images: PathBuf,
    pub out: PathBuf,
    pub outcome: Outcome,
    /// The cleaned images, relative to the folder.
    pub cleaned: Vec<String>,
}

/// Where the view writes the cleaned copy of `images`: beside it.
pub fn default_clean_out(images: &Path) -> PathBuf {
    let name = images.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "images".into());
    images.parent().unwrap_or(Path::new(".")).join(format!("{name}-clean"))
}

/// The cleaning as `spurion clean --sweep SWEEP [--ledger LEDGER]` runs it, with the defaults.
pub fn run(images: PathBuf, sweep: PathBuf, ledger: Option<PathBuf>, open: OpenOptions, ctl: &Control) -> Result<CleanDone> {
    let from_sweep = SweepSource::open(&sweep, Limits::default())?;
    let from_ledger = ledger.map(|l| LedgerSource::open(&l, vec![Verdict::Marked], LedgerRegions::DrawnElseFound, Default::default())).transpose()?;
    let mut sources: Vec<&dyn Source> = vec![&from_sweep];
    if let Some(l) = &from_ledger {
        sources.push(l);
    }
    let mut job = Job {
        images: images.clone(),
        out: default_clean_out(&images),
        exclude: vec![],
        sources,
        open,
        kinds: vec![RegionKind::BorderBand, RegionKind::BurnedInMark, RegionKind::DrawnRegion],
        min_confidence: 0.0,
    };
    // A copy made with other settings (the ledger has changed since, say) is kept: the next
    // free FOLDER-clean-N takes the new one.
    let first = job.out.clone();
    let mut n = 1;
    while !clean::can_write_into(&job, &job.out)? {
        n += 1;
        let name = first.file_name().map(|f| f.to_string_lossy().into_owned()).unwrap_or_default();
        job.out = first.with_file_name(format!("{name}-{n}"));
    }
    let out = job.out.clone();
    let outcome = clean::run(&job, ctl)?;
    let cleaned = clean::records(&out)?.into_values().filter(|r| r.action == clean::Action::Cleaned).map(|r| r.file).collect();
    Ok(CleanDone { images, out, outcome, cleaned })
}

impl Inspector {
    /// Cleans the images the shown sweep (and the open ledger) picked.
    pub fn start_clean(&mut self) {
        if self.sweep.clean.job.is_some_and(|id| self.workers.is_running(id)) {
            return self.note(NoteKind::Warning, "a cleaning is running: cancel it first, or wait for it");
        }
        let Some(r) = self.sweep.result.clone() else {
            return self.note(NoteKind::Warning, "clean after a sweep: the sweep says which images carry marks");
        };
        let ledger = self.ledger.ledger().map(|l| l.path().to_path_buf());
        // As `spurion clean` finds regions, so both resume each other's copy.
        let open = OpenOptions::default();
        let (images, sweep) = (r.images_root.clone(), r.out.clone());
        let label = format!("cleaning the marked images of {}", short_name(&images));
        let (job, _) = self.workers.spawn(
            label,
            true,
            move |ctl, _| {
                let r = run(images, sweep, ledger, open, ctl);
                let cancelled = r.as_ref().err().is_some_and(crate::model::is_cancelled) || ctl.is_cancelled();
                Done::Clean { result: r.map_err(|e| format!("{e:#}")), cancelled }
            },
            move |msg| Done::Clean { result: Err(msg), cancelled: false },
        );
        self.sweep.clean = CleanState { job: Some(job), started: Some(std::time::Instant::now()) };
    }

    /// A cleaning's answer: a note, and the cleaned copy of the image on the slide (or of the
    /// first cleaned image) opened beside its original.
    pub(crate) fn clean_done(&mut self, result: Result<CleanDone, String>, cancelled: bool) {
        self.sweep.clean.job = None;
        if cancelled {
            return self.note(NoteKind::Info, "cleaning cancelled: what was written is kept, and starting it again goes on from there");
        }
        let d = match result {
            Ok(d) => d,
            Err(e) => return self.note(NoteKind::Error, format!("cleaning failed: {e}")),
        };
        let o = &d.outcome;
        self.note(
            NoteKind::Info,
            format!("{} images cleaned ({} pixels changed), {} files copied, into {}", o.cleaned, o.pixels_changed, o.copied + o.picked_no_region, d.out.display()),
        );
        let on_slide = self.selected.and_then(|i| self.images.get(i)).and_then(|e| e.path.strip_prefix(std::path::absolute(&d.images).ok()?).ok().map(Path::to_path_buf));
        let rel = on_slide
            .map(|p| p.components().map(|c| c.as_os_str().to_string_lossy().into_owned()).collect::<Vec<_>>().join("/"))
            .filter(|rel| d.cleaned.contains(rel))
            .or_else(|| d.cleaned.first().cloned());
        if let Some(rel) = rel {
            let copy = rel.split('/').fold(d.out.clone(), |p, part| p.join(part));
            let (i, _) = self.push_image(copy);
            self.select(i);
        }
    }
}
