//! The sweep in the inspector: what the sweep view edits (folders, filters, the sort), the
//! finished sweep it shows, and the rows in the order and selection the view asks for. The
//! sweep itself, its files and its thumbnails are made on workers ([`sweep_work`]).

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use egui::TextureHandle;

use crate::ledger::{Ledger, Verdict};
use crate::sweep::{GroupSummary, RecurringHotspot, Row, Skipped};

pub mod clean_work;
pub mod ledger;
pub mod sweep_work;

use super::app::Inspector;
use super::short_name;
use self::sweep_work::ThumbLookup;
use super::state::{JobId, NoteKind};
use super::work::Done;

/// What the bottom panel shows.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum BottomTab {
    #[default]
    Strip,
    Sweep,
}

/// A column of the sweep table (the ones it sorts by).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Column {
    Image,
    Group,
    Class,
    MarkShare,
    Lift,
    Removal,
    Suspect,
    Verdict,
}

impl Column {
    pub const ALL: [Column; 8] =
        [Column::Image, Column::Group, Column::Class, Column::MarkShare, Column::Lift, Column::Removal, Column::Suspect, Column::Verdict];

    pub fn title(self) -> &'static str {
        match self {
            Column::Image => "image",
            Column::Group => "group",
            Column::Class => "class",
            Column::MarkShare => "mark share",
            Column::Lift => "lift",
            Column::Removal => "removal",
            Column::Suspect => "suspect",
            Column::Verdict => "verdict",
        }
    }

    pub fn hint(self) -> &'static str {
        match self {
            Column::Image => "the image's path in the sweep's folder",
            Column::Group => "the first-level sub-folder, or the manifest's column",
            Column::Class => "the model's top class for the image",
            Column::MarkShare => "share of the supporting attribution on all regions together (found and drawn)",
            Column::Lift => "mark share divided by the regions' share of the image's area",
            Column::Removal => "how far painting every region out lowers the target's probability (→ the top class when it changes)",
            Column::Suspect => "which evidence made the image suspect",
            Column::Verdict => "the curator's verdict in the ledger (keys 1–4 on the image in the slide)",
        }
    }
}

/// The order of the table.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Sort {
    pub column: Column,
    pub descending: bool,
}

impl Default for Sort {
    fn default() -> Self {
        // The sweep's report ranks by mark share, largest first: the same here.
        Sort { column: Column::MarkShare, descending: true }
    }
}

/// Which rows the table shows.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Filter {
    pub suspect_only: bool,
    pub group: Option<String>,
    /// The top class's label.
    pub class: Option<String>,
    /// `Some(None)`: images with no verdict yet.
    pub verdict: Option<Option<Verdict>>,
    pub min_mark_share: f64,
}

/// A finished sweep as the view shows it.
pub struct SweepDone {
    /// Tells one sweep's result from the next (thumbnails and orders belong to one).
    pub id: u64,
    pub out: PathBuf,
    pub images_root: PathBuf,
    pub rows: Vec<Row>,
    pub skipped: Vec<Skipped>,
    pub groups: Vec<GroupSummary>,
    /// Each group's atlas as a picture, with the size of the model grid it is on.
    pub atlas: Vec<(String, egui::ColorImage, [usize; 2])>,
    /// The recurring hotspots, each with its exemplars cut out of their images.
    pub recurring: Vec<(RecurringHotspot, Vec<egui::ColorImage>)>,
    pub computed: usize,
    pub cached: usize,
    /// Images left out because the ledger marks them exclude.
    pub left_out: usize,
    pub seconds: f64,
    /// Read back from an earlier sweep's files rather than run here.
    pub from_files: bool,
    pub lookup: Arc<ThumbLookup>,
}

/// A thumbnail: being drawn, drawn, or not to be had.
pub enum Thumb {
    Pending,
    Ready(TextureHandle),
    Failed(String),
}

/// The sweep view's state.
pub struct SweepState {
    pub tab: BottomTab,
    /// The folder swept (its images, recursively).
    pub images_field: String,
    /// Where the sweep's files and cache go.
    pub out_field: String,
    /// Groups: empty for the first-level sub-folders, or FILE:COLUMN of a manifest.
    pub groups_field: String,
    /// Paths left out, as `spurion sweep --exclude` patterns separated by commas.
    pub leave_out_field: String,
    pub leave_out_excluded: bool,
    /// The folder the view suggested, and whether it was opened as a folder (an image's folder
    /// gives way to a folder opened after it).
    suggested: Option<(String, bool)>,
    pub job: Option<JobId>,
    /// When the running sweep started (for its rate and time left).
    pub started: Option<std::time::Instant>,
    pub result: Option<Arc<SweepDone>>,
    pub sort: Sort,
    pub filter: Filter,
    pub thumbs: HashMap<String, Thumb>,
    pub thumb_job: Option<JobId>,
    pub atlas_tex: Vec<(String, TextureHandle, [usize; 2])>,
    /// The recurring hotspots' exemplars, as textures, in the result's order.
    pub recurring_tex: Vec<Vec<TextureHandle>>,
    /// Thumbnails the table asked for this frame.
    pub wanted_thumbs: Vec<String>,
    order: Vec<usize>,
    order_for: Option<(u64, Sort, Filter, u64)>,
    /// Each row's key in the ledger, for the ledger at this path.
    keys: Vec<Option<String>>,
    keys_for: Option<(u64, Option<PathBuf>)>,
    /// The cleaning of the marked images.
    pub clean: clean_work::CleanState,
}

impl Default for SweepState {
    fn default() -> Self {
        SweepState {
            tab: BottomTab::Strip,
            images_field: String::new(),
            out_field: String::new(),
            groups_field: String::new(),
            leave_out_field: String::new(),
            leave_out_excluded: false,
            suggested: None,
            job: None,
            started: None,
            result: None,
            sort: Sort::default(),
            filter: Filter::default(),
            thumbs: HashMap::new(),
            thumb_job: None,
            atlas_tex: Vec::new(),
            recurring_tex: Vec::new(),
            wanted_thumbs: Vec::new(),
            order: Vec::new(),
            order_for: None,
            keys: Vec::new(),
            keys_for: None,
            clean: Default::default(),
        }
    }
}

/// Where a sweep of `images` writes by default: beside the folder, so the command line
/// (`spurion sweep --out` the same folder) and the inspector share one cache.
pub fn default_out(images: &Path) -> PathBuf {
    let name = images.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| "images".into());
    images.parent().unwrap_or(Path::new(".")).join(format!("{name}-sweep"))
}

/// Whether `dir` holds a sub-folder other than `except` (a cheap look at one folder).
fn has_sub_folders_but(dir: &Path, except: &str) -> bool {
    std::fs::read_dir(dir).is_ok_and(|rd| rd.flatten().any(|e| e.path().is_dir() && e.file_name() != except))
}

/// Orders two optional figures, a missing one last whichever way the column is sorted.
fn by_figure(a: Option<f64>, b: Option<f64>, descending: bool) -> std::cmp::Ordering {
    use std::cmp::Ordering::*;
    match (a, b) {
        (Some(x), Some(y)) if descending => y.total_cmp(&x),
        (Some(x), Some(y)) => x.total_cmp(&y),
        (Some(_), None) => Less,
        (None, Some(_)) => Greater,
        (None, None) => Equal,
    }
}

impl SweepState {
    /// Sets the folders when the user has not typed any: the first folder opened (an image's
    /// own folder until a folder is opened), its sweep folder beside it, and `masks` left out
    /// when the folder holds ground-truth masks there.
    pub fn suggest(&mut self, images: &Path, is_folder: bool) {
        let ours = self.suggested.as_ref().is_some_and(|(t, folder)| *t == self.images_field && !folder && is_folder);
        if !(self.images_field.trim().is_empty() || ours) || self.job.is_some() {
            return;
        }
        self.suggested = Some((images.display().to_string(), is_folder));
        self.images_field = images.display().to_string();
        self.out_field = default_out(images).display().to_string();
        if self.leave_out_field.is_empty() && images.join("masks").is_dir() {
            self.leave_out_field = "masks".into();
        }
        // A folder with its images at the top and a manifest naming their sites (the demo's)
        // is grouped by site rather than as one group.
        if self.groups_field.is_empty() && is_folder && !has_sub_folders_but(images, "masks") {
            self.groups_field = crate::sweep::plan::manifest_groups(images, "site").unwrap_or_default();
        }
    }

    /// Takes a finished sweep: thumbnails and atlases of the one before are dropped.
    pub fn take(&mut self, done: SweepDone, ctx: &egui::Context) {
        self.thumbs.clear();
        self.atlas_tex = done
            .atlas
            .iter()
            .map(|(g, img, grid)| (g.clone(), ctx.load_texture(format!("atlas {g}"), img.clone(), egui::TextureOptions::NEAREST), *grid))
            .collect();
        self.recurring_tex = done
            .recurring
            .iter()
            .map(|(c, pics)| {
                let name = |k: usize| format!("recurring hotspot {} exemplar {k}", c.id);
                pics.iter().enumerate().map(|(k, p)| ctx.load_texture(name(k), p.clone(), egui::TextureOptions::NEAREST)).collect()
            })
            .collect();
        if self.filter.group.as_ref().is_some_and(|g| !done.rows.iter().any(|r| &r.group == g)) {
            self.filter.group = None;
        }
        self.result = Some(Arc::new(done));
        self.order_for = None;
        self.keys_for = None;
    }

    /// Each row's key in `ledger` (kept until the sweep or the ledger file changes).
    pub fn ledger_keys(&mut self, ledger: Option<&Ledger>) -> &[Option<String>] {
        let Some(r) = &self.result else { return &[] };
        let marker = (r.id, ledger.map(|l| l.path().to_path_buf()));
        if self.keys_for.as_ref() != Some(&marker) {
            self.keys = r.rows.iter().map(|row| ledger.and_then(|l| l.key_for(&r.images_root.join(&row.path)).ok())).collect();
            self.keys_for = Some(marker);
        }
        &self.keys
    }

    /// The live verdict of row `i`.
    pub fn verdict(&self, ledger: Option<&Ledger>, i: usize) -> Option<Verdict> {
        let k = self.keys.get(i)?.as_ref()?;
        ledger?.verdict(k)
    }

    /// The rows the filter lets through, in the sort's order (indices into the rows), computed
    /// again only when the sweep, the sort, the filter or the ledger changed.
    pub fn order(&mut self, ledger: Option<&Ledger>, generation: u64) -> &[usize] {
        self.ledger_keys(ledger);
        let Some(r) = self.result.clone() else { return &[] };
        let marker = (r.id, self.sort, self.filter.clone(), generation);
        if self.order_for.as_ref() == Some(&marker) {
            return &self.order;
        }
        let f = &self.filter;
        let verdicts: Vec<Option<Verdict>> = (0..r.rows.len()).map(|i| self.verdict(ledger, i)).collect();
        let mut order: Vec<usize> = (0..r.rows.len())
            .filter(|&i| {
                let row = &r.rows[i];
                (!f.suspect_only || row.suspect)
                    && f.group.as_ref().is_none_or(|g| &row.group == g)
                    && f.class.as_ref().is_none_or(|c| &row.top_label == c)
                    && f.verdict.is_none_or(|v| verdicts[i] == v)
                    && (f.min_mark_share <= 0.0 || row.mark_share.is_some_and(|m| m >= f.min_mark_share))
            })
            .collect();
        let Sort { column, descending } = self.sort;
        let flip = |o: std::cmp::Ordering| if descending { o.reverse() } else { o };
        order.sort_by(|&a, &b| {
            let (x, y) = (&r.rows[a], &r.rows[b]);
            let o = match column {
                Column::Image => flip(x.path.cmp(&y.path)),
                Column::Group => flip(x.group.cmp(&y.group)),
                Column::Class => flip(x.top_label.cmp(&y.top_label)),
                Column::MarkShare => by_figure(x.mark_share, y.mark_share, descending),
                Column::Lift => by_figure(x.lift, y.lift, descending),
                Column::Removal => by_figure(x.removal_probability_drop, y.removal_probability_drop, descending),
                Column::Suspect => flip(x.suspect.cmp(&y.suspect)),
                // No verdict sorts after the four verdicts.
                Column::Verdict => flip(verdicts[a].map_or(9, |v| v.key()).cmp(&verdicts[b].map_or(9, |v| v.key()))),
            };
            o.then_with(|| x.path.cmp(&y.path))
        });
        self.order = order;
        self.order_for = Some(marker);
        &self.order
    }

    /// A click on a column's title: sort by it, or turn its order round.
    pub fn sort_by(&mut self, column: Column) {
        if self.sort.column == column {
            self.sort.descending = !self.sort.descending;
        } else {
            // Figures read best largest first; names in alphabetical order.
            let descending = matches!(column, Column::MarkShare | Column::Lift | Column::Removal | Column::Suspect);
            self.sort = Sort { column, descending };
        }
    }

    /// The path of the image of row `i`.
    pub fn image_path(&self, i: usize) -> Option<PathBuf> {
        let r = self.result.as_ref()?;
        Some(r.images_root.join(&r.rows.get(i)?.path))
    }
}

impl Inspector {
    /// Starts a sweep of the view's folder with the reading form's request, so the table shows
    /// for each image what the slide shows for it.
    pub fn start_sweep(&mut self) {
        if self.sweep.job.is_some_and(|id| self.workers.is_running(id)) {
            self.note(NoteKind::Warning, "a sweep is running: cancel it first, or wait for it");
            return;
        }
        let Some(session) = self.session.clone() else {
            self.note(NoteKind::Warning, "the sweep starts once a model is loaded");
            return;
        };
        let images = PathBuf::from(self.sweep.images_field.trim());
        let out = PathBuf::from(self.sweep.out_field.trim());
        if self.sweep.images_field.trim().is_empty() || self.sweep.out_field.trim().is_empty() {
            self.note(NoteKind::Warning, "type or pick the folder to sweep and the folder for the sweep's files first");
            return;
        }
        let request = match self.form.request(Some(&images)) {
            Ok(r) => r,
            Err(e) => return self.note(NoteKind::Warning, format!("the sweep takes the reading's settings, which are not ready: {e}")),
        };
        let (groups, exclude) = match (sweep_work::groups_of(&self.sweep.groups_field), sweep_work::exclude_of(&self.sweep.leave_out_field)) {
            (Ok(g), Ok(e)) => (g, e),
            (Err(e), _) | (_, Err(e)) => return self.note(NoteKind::Warning, format!("{e:#}")),
        };
        if self.sweep.leave_out_excluded && self.ledger.ledger().is_none() {
            self.note(NoteKind::Warning, "no ledger is open, so no image is marked exclude: the sweep reads them all");
        }
        self.commit_note();
        self.next_sweep += 1;
        let plan = sweep_work::SweepPlan {
            session,
            request,
            images,
            out,
            groups,
            exclude,
            ledger: self.ledger.ledger().cloned(),
            leave_out_excluded: self.sweep.leave_out_excluded,
            id: self.next_sweep,
        };
        let id = plan.id;
        let label = format!("sweep of {} · {}", short_name(&plan.images), plan.request.describe());
        let (job, _) = self.workers.spawn(
            label,
            true,
            move |ctl, _| {
                let r = sweep_work::run(plan, ctl);
                let cancelled = r.as_ref().err().is_some_and(crate::model::is_cancelled) || ctl.is_cancelled();
                Done::Sweep { id, result: r.map_err(|e| format!("{e:#}")), cancelled }
            },
            move |msg| Done::Sweep { id, result: Err(msg), cancelled: false },
        );
        self.sweep.job = Some(job);
        self.sweep.started = Some(std::time::Instant::now());
        self.sweep.tab = BottomTab::Sweep;
    }

    /// Shows the files an earlier sweep wrote into the view's sweep folder.
    pub fn load_sweep(&mut self) {
        let Some(session) = self.session.clone() else {
            self.note(NoteKind::Warning, "the sweep's files are shown once a model is loaded (it draws the thumbnails)");
            return;
        };
        let out = PathBuf::from(self.sweep.out_field.trim());
        let ledger = self.ledger.ledger().cloned();
        self.next_sweep += 1;
        let id = self.next_sweep;
        let (job, _) = self.workers.spawn(
            format!("reading the sweep in {}", short_name(&out)),
            false,
            move |_, _| Done::Sweep { id, result: sweep_work::load(&session, &out, ledger.as_ref(), id).map_err(|e| format!("{e:#}")), cancelled: false },
            move |msg| Done::Sweep { id, result: Err(msg), cancelled: false },
        );
        self.sweep.job = Some(job);
    }

    /// A sweep's answer.
    pub(crate) fn sweep_done(&mut self, id: u64, result: Result<SweepDone, String>, cancelled: bool) {
        if id != self.next_sweep {
            return;
        }
        self.sweep.job = None;
        if cancelled {
            self.note(
                NoteKind::Warning,
                format!(
                    "sweep cancelled: the images read so far are kept in {}; start it again to go on from there",
                    PathBuf::from(self.sweep.out_field.trim()).join("cache").display()
                ),
            );
            return;
        }
        match result {
            Ok(d) => {
                let suspect = d.rows.iter().filter(|r| r.suspect).count();
                let said = if d.from_files {
                    format!("sweep read from {}: {} images, {suspect} suspect", d.out.display(), d.rows.len())
                } else {
                    format!(
                        "sweep done: {} images ({} computed, {} from the cache), {suspect} suspect, {} could not be read; files in {}",
                        d.rows.len(),
                        d.computed,
                        d.cached,
                        d.skipped.len(),
                        d.out.display()
                    )
                };
                self.note(NoteKind::Info, said);
                let ctx = self.ctx.clone();
                self.sweep.take(d, &ctx);
                self.sweep.tab = BottomTab::Sweep;
            }
            Err(e) => self.note(NoteKind::Error, format!("the sweep stopped: {e}")),
        }
    }

    /// Opens row `i`'s image in the slide (added to the image list if it is not there).
    pub fn open_row(&mut self, i: usize) {
        let Some(p) = self.sweep.image_path(i) else { return };
        let (at, _) = self.push_image(p);
        if self.selected != Some(at) {
            self.select(at);
        }
    }

    /// Opens the row after (or before) the slide's image in the table's order.
    pub fn step_row(&mut self, by: i32) {
        let (ledger, generation) = (self.ledger.ledger().cloned(), self.ledger.generation);
        let current = self.current_image().map(|e| e.path.clone());
        let order = self.sweep.order(ledger.as_ref(), generation).to_vec();
        if order.is_empty() {
            return;
        }
        let at = order.iter().position(|&i| self.sweep.image_path(i) == current);
        let next = match at {
            Some(p) => (p as i64 + by as i64).clamp(0, order.len() as i64 - 1) as usize,
            None => 0,
        };
        self.open_row(order[next]);
    }

    /// Starts drawing the thumbnails the table asked for, a few at a time.
    pub(crate) fn sync_thumbnails(&mut self) {
        let wanted = std::mem::take(&mut self.sweep.wanted_thumbs);
        if self.sweep.thumb_job.is_some_and(|id| self.workers.is_running(id)) {
            return;
        }
        let Some(r) = self.sweep.result.clone() else { return };
        let todo: Vec<String> = wanted.into_iter().filter(|rel| !self.sweep.thumbs.contains_key(rel)).take(24).collect();
        if todo.is_empty() {
            return;
        }
        // A long table scrolled through keeps at most this many thumbnails.
        if self.sweep.thumbs.len() > 4000 {
            self.sweep.thumbs.clear();
        }
        for rel in &todo {
            self.sweep.thumbs.insert(rel.clone(), Thumb::Pending);
        }
        let (lookup, sweep) = (r.lookup.clone(), r.id);
        let (job, _) = self.workers.spawn(
            "sweep thumbnails",
            false,
            move |_, outbox| {
                for rel in todo {
                    let result = sweep_work::thumbnail(&lookup, &rel).map_err(|e| format!("{e:#}"));
                    outbox.send(Done::Thumb { sweep, rel, result });
                }
                Done::Finished
            },
            |msg| Done::Failed(format!("the sweep's thumbnails failed: {msg}")),
        );
        self.sweep.thumb_job = Some(job);
    }

    pub(crate) fn thumb_done(&mut self, sweep: u64, rel: String, result: Result<egui::ColorImage, String>) {
        if self.sweep.result.as_ref().is_none_or(|r| r.id != sweep) {
            return;
        }
        let t = match result {
            Ok(img) => Thumb::Ready(self.ctx.load_texture(format!("thumb {rel}"), img, egui::TextureOptions::LINEAR)),
            Err(e) => Thumb::Failed(e),
        };
        self.sweep.thumbs.insert(rel, t);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn missing_figures_sort_last_both_ways() {
        use std::cmp::Ordering::*;
        assert_eq!(by_figure(Some(0.2), None, true), Less);
        assert_eq!(by_figure(Some(0.2), None, false), Less);
        assert_eq!(by_figure(Some(0.2), Some(0.5), true), Greater);
        assert_eq!(by_figure(Some(0.2), Some(0.5), false), Less);
    }

    #[test]
    fn the_sweep_folder_sits_beside_the_images() {
        assert_eq!(default_out(Path::new("/data/coop/images")), PathBuf::from("/data/coop/images-sweep"));
    }
}
