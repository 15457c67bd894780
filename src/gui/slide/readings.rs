//! The readings the inspector wants: the slide's, the baseline strip's, and the agreement
//! figures over the strip; each started on a worker once, cached by its key.

use std::path::PathBuf;
use std::sync::Arc;

use ndarray::Array2;

use crate::methods::agree;

use crate::gui::app::Inspector;
use crate::gui::short_name;
use crate::gui::state::*;
use crate::gui::work::Done;

impl Inspector {
    pub fn current_image(&self) -> Option<&ImageEntry> {
        self.selected.and_then(|i| self.images.get(i))
    }

    pub fn current_prepared(&self) -> Option<Arc<Prepared>> {
        match &self.current_image()?.state {
            ImageState::Ready(p) => Some(p.clone()),
            _ => None,
        }
    }

    pub(crate) fn image_dir(&self) -> Option<PathBuf> {
        self.current_image().and_then(|e| e.path.parent().map(|p| p.to_path_buf()))
    }

    /// The key the slide wants to show now, or why there is none.
    pub fn wanted_key(&self) -> Result<Key, String> {
        let img = self.current_image().ok_or("no image selected")?;
        let request = self.form.request(self.image_dir().as_deref())?;
        Ok(Key::new(&img.path, request, self.ledger.drawn_of(&img.path)))
    }

    pub fn current_shown(&self) -> Option<(Key, Arc<Shown>)> {
        let k = self.wanted_key().ok()?;
        let s = self.cache.done(&k)?.clone();
        Some((k, s))
    }

    /// Starts a reading for `key` unless it is cached or already running. When the same
    /// reading is done under other drawn regions, only its figures are computed again; while it
    /// is being computed, nothing starts (its end brings this back).
    pub(crate) fn request(&mut self, key: &Key, for_slide: bool) -> Option<JobId> {
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
        let earlier = self.cache.same_reading_done(key).cloned();
        if earlier.is_none() && self.cache.same_reading_pending(key) {
            return None;
        }
        let (k, failed) = (key.clone(), key.clone());
        let label = format!(
            "{} · {}{}",
            short_name(&key.image),
            if earlier.is_some() { "figures with the drawn regions · " } else { "" },
            key.request.describe()
        );
        let (id, _) = self.workers.spawn(
            label,
            true,
            move |ctl, _| {
                let r = match &earlier {
                    Some(shown) => crate::gui::slide::engine::reassess(&session, &prepared, shown, &k.drawn),
                    None => crate::gui::slide::engine::read(&session, &prepared, &k.request, &k.drawn, ctl),
                };
                let cancelled = r.as_ref().err().is_some_and(crate::model::is_cancelled) || ctl.is_cancelled();
                Done::Reading { key: k, result: r.map_err(|e| format!("{e:#}")), cancelled }
            },
            move |msg| Done::Reading { key: failed, result: Err(msg), cancelled: false },
        );
        self.cache.slots.insert(key.clone(), Slot::Pending(id));
        if for_slide {
            self.slide_job = Some((key.clone(), id));
        }
        Some(id)
    }

    /// Keeps the slide's reading in step with the selection and the form.
    pub(crate) fn sync_slide(&mut self) {
        let wanted = self.wanted_key();
        self.form_problem = wanted.as_ref().err().cloned().filter(|_| self.current_image().is_some());
        let Ok(key) = wanted else { return };
        // A slide job for a key nobody wants any more is stopped, so its cores go to the new one.
        if let Some((k, id)) = self.slide_job.clone()
            && !k.same_reading(&key)
        {
            let strip_needs = self.strip.wanted.as_ref().is_some_and(|p| p.keys().contains(&k));
            if !strip_needs && self.workers.is_running(id) {
                self.workers.cancel(id);
            }
            self.slide_job = None;
        }
        if self.cache.slots.get(&key).is_none() {
            self.request(&key, true);
        }
    }

    /// Starts the strip for the current image and settings.
    pub fn compute_strip(&mut self) {
        let Some(img_path) = self.current_image().map(|e| e.path.clone()) else {
            self.note(NoteKind::Warning, "open an image first");
            return;
        };
        if !self.form.method.entry().in_strip {
            self.note(
                NoteKind::Warning,
                format!(
                    "the baseline strip compares baselines one reference input at a time, which {} does not take; \
                     choose integrated gradients or occlusion",
                    self.form.method.entry().title
                ),
            );
            return;
        }
        let plan = StripPlan::new(&img_path, &self.form, self.image_dir().as_deref(), &self.ledger.drawn_of(&img_path));
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
        let label = format!("baseline strip · {} maps", keys.len());
        let job = move |ctl: &crate::control::Control, outbox: &crate::gui::work::Outbox| {
            for k in keys {
                if ctl.is_cancelled() {
                    break;
                }
                let r = crate::gui::slide::engine::read(&session, &prepared, &k.request, &k.drawn, ctl);
                let cancelled = r.as_ref().err().is_some_and(crate::model::is_cancelled) || ctl.is_cancelled();
                outbox.send(Done::Reading { key: k, result: r.map_err(|e| format!("{e:#}")), cancelled });
            }
            Done::Finished
        };
        let (id, _) = self.workers.spawn(label, true, job, |msg| Done::Failed(format!("the baseline strip stopped: {msg}")));
        for k in missing {
            self.cache.slots.insert(k, Slot::Pending(id));
        }
        self.strip_job = Some(id);
    }

    /// Starts the agreement job once every map of the wanted strip is read.
    pub(crate) fn sync_agreement(&mut self) {
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
        self.workers.spawn(
            "agreement figures",
            false,
            move |_ctl, _| {
                let refs: Vec<&Array2<f32>> = maps.iter().map(|s| &s.map).collect();
                Done::Agreement { key: k, result: agree::agreement(&refs, sign, share) }
            },
            |msg| Done::Failed(format!("the agreement figures failed: {msg}")),
        );
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
}
