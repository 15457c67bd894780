//! Changes to a ledger: what a curator did to one image, and when. A change is applied in
//! memory at once and replayed on the file's latest content under its lock, so two writers
//! never lose each other's work.

use anyhow::{Context, Result};

use super::{Entry, Stamp, Verdict, key};
use crate::regions::drawn::DrawnShape;

/// One change to one image's entry.
#[derive(Clone, Debug, PartialEq)]
pub struct Change {
    /// The image's key (its path relative to the ledger's root, with `/`).
    pub image: String,
    /// When the change was made: the entry's `changed` time.
    pub at: Stamp,
    pub edit: Edit,
}

/// What a change does.
#[derive(Clone, Debug, PartialEq)]
pub enum Edit {
    /// Sets the verdict (`None` clears it).
    Verdict(Option<Verdict>),
    /// Sets the note (an empty text clears it).
    Note(String),
    /// Adds drawn regions, drawn on an image of `image_size` (`[width, height]`). Regions drawn
    /// earlier on an image of another size are dropped: they belong to another version of it
    /// (front ends check and say so before making such a change).
    AddDrawn { shapes: Vec<DrawnShape>, image_size: Option<[usize; 2]> },
    /// Replaces the drawn regions (none: clears them).
    SetDrawn { shapes: Vec<DrawnShape>, image_size: Option<[usize; 2]> },
    /// Removes the image's entry.
    Forget,
}

impl Change {
    /// A change made now.
    pub fn now(image: impl Into<String>, edit: Edit) -> Change {
        Change { image: image.into(), at: Stamp::now(), edit }
    }

    pub fn verdict(image: impl Into<String>, verdict: Option<Verdict>) -> Change {
        Change::now(image, Edit::Verdict(verdict))
    }

    pub fn note(image: impl Into<String>, note: impl Into<String>) -> Change {
        Change::now(image, Edit::Note(note.into()))
    }

    /// Whether the change can be applied: a valid key, well-formed shapes.
    pub fn check(&self) -> Result<()> {
        key::validate(&self.image)?;
        if let Edit::AddDrawn { shapes, image_size } | Edit::SetDrawn { shapes, image_size } = &self.edit {
            for (i, s) in shapes.iter().enumerate() {
                s.shape.check().with_context(|| format!("drawn region {i} (\"{}\") of {}", s.label, self.image))?;
            }
            if let Some([w, h]) = image_size
                && (*w == 0 || *h == 0)
            {
                anyhow::bail!("drawn regions of {}: an image size of {w}×{h} has no pixel", self.image);
            }
        }
        Ok(())
    }
}

impl Edit {
    /// Applies the edit to an entry and stamps it.
    pub(crate) fn apply_to(&self, e: &mut Entry, at: Stamp) {
        match self {
            Edit::Verdict(v) => e.verdict = *v,
            Edit::Note(n) => e.note = n.clone(),
            Edit::AddDrawn { shapes, image_size } => {
                if image_size.is_some() && e.image_size.is_some() && *image_size != e.image_size {
                    e.drawn.clear();
                }
                e.drawn.extend(shapes.iter().cloned());
                if image_size.is_some() {
                    e.image_size = *image_size;
                }
            }
            Edit::SetDrawn { shapes, image_size } => {
                e.drawn = shapes.clone();
                e.image_size = *image_size;
            }
            Edit::Forget => *e = Entry::empty(at),
        }
        if e.drawn.is_empty() {
            e.image_size = None;
        }
        e.changed = at;
    }
}
