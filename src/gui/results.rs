//! Taking finished jobs off the channel at the start of every frame.

use std::sync::Arc;

use super::app::Inspector;
use super::short_name;
use super::state::*;
use super::work::Done;

impl Inspector {
    pub(crate) fn take_results(&mut self) {
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
                            // A guessed feed is said once, and the window that writes a card offered.
                            if let Some(w) = &s.feed.warning {
                                self.note(NoteKind::Warning, w.clone());
                                self.feed_window.open = true;
                            }
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
                Done::Display { path, key, result } => match result {
                    Ok(img) => {
                        let t = self.ctx.load_texture(format!("display {}", path.display()), img, egui::TextureOptions::NEAREST);
                        self.tex.display.insert((path, key), Some(t));
                    }
                    Err(e) => {
                        self.note(NoteKind::Error, format!("display window: {e}"));
                        self.view.display_window = None;
                        self.tex.display.remove(&(path, key));
                    }
                },
                Done::Review(d) => self.review_done(id, d),
                Done::Ledger { path, result } => self.ledger_opened(path, result),
                Done::Sweep { id, result, cancelled } => self.sweep_done(id, result, cancelled),
                Done::Clean { result, cancelled } => self.clean_done(result, cancelled),
                Done::Thumb { sweep, rel, result } => self.thumb_done(sweep, rel, result),
                Done::Finished => {}
                Done::Failed(e) => self.note(NoteKind::Error, e),
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
}
