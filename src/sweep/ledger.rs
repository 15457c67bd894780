//! A curator's ledger in a sweep: each image's key in it, the images it marks exclude left out
//! on request, the regions drawn on them (which join the found ones), and the verdicts written
//! into the rows; a recurring hotspot accepted as a mark for all its images at once.
//! `spurion sweep --ledger`, `spurion ledger accept-cluster` and the inspector's sweep come here.

use std::collections::BTreeMap;
use std::path::Path;

use super::plan::Item;
use super::recurring::{Member, RecurringHotspot};
use super::row::Row;
use crate::ledger::{Change, Edit, Ledger, Verdict};
use crate::regions::DrawnFile;
use crate::regions::drawn::{DrawnShape, Shape};

/// A ledger as one sweep sees it: the key of every image of the sweep that lies under the
/// ledger's root (an image outside it has none).
pub struct SweepLedger<'a> {
    pub ledger: &'a Ledger,
    /// Image path relative to the images folder → its key in the ledger.
    pub keys: BTreeMap<String, String>,
}

impl<'a> SweepLedger<'a> {
    pub fn new(ledger: &'a Ledger, items: &[Item]) -> SweepLedger<'a> {
        let keys = items.iter().filter_map(|i| ledger.key_for(&i.path).ok().map(|k| (i.rel.clone(), k))).collect();
        SweepLedger { ledger, keys }
    }

    fn entry(&self, rel: &str) -> Option<&crate::ledger::Entry> {
        self.keys.get(rel).and_then(|k| self.ledger.entry(k))
    }

    /// Leaves out of `items` the images the ledger marks exclude; how many were left out.
    pub fn leave_out_excluded(&self, items: &mut Vec<Item>) -> usize {
        let before = items.len();
        items.retain(|i| !self.keys.get(&i.rel).is_some_and(|k| self.ledger.is_excluded(k)));
        before - items.len()
    }

    /// The regions drawn on each image that has any, by its path relative to the images folder.
    pub fn drawn(&self) -> BTreeMap<String, DrawnFile> {
        self.keys
            .keys()
            .filter_map(|rel| {
                self.entry(rel).filter(|e| !e.drawn.is_empty()).map(|e| (rel.clone(), DrawnFile::new(e.image_size, e.drawn.clone())))
            })
            .collect()
    }

    /// Writes each row's verdict as the ledger holds it now.
    pub fn set_verdicts(&self, rows: &mut [Row]) {
        for r in rows {
            r.verdict = self.entry(&r.path).and_then(|e| e.verdict).map(|v| v.name().to_string());
        }
    }
}

/// The ledger changes that accept a recurring hotspot as a mark: for each image of the cluster
/// that lies under the ledger's root, the verdict `marked` and each of its hotspots' boxes as a
/// drawn region labelled "recurring hotspot N" (a box already drawn under that label is not
/// drawn again, so accepting twice changes nothing). `images_root` is the sweep's images
/// folder. Returns the changes and the images left out because they lie outside the root.
pub fn accept_cluster(ledger: &Ledger, cluster: &RecurringHotspot, images_root: &Path) -> (Vec<Change>, Vec<String>) {
    let label = format!("recurring hotspot {}", cluster.id);
    let mut by_image: BTreeMap<&str, Vec<&Member>> = BTreeMap::new();
    for m in &cluster.members {
        by_image.entry(&m.path).or_default().push(m);
    }
    let (mut changes, mut outside) = (vec![], vec![]);
    for (path, members) in by_image {
        let Ok(key) = ledger.key_for(&images_root.join(path)) else {
            outside.push(path.to_string());
            continue;
        };
        let entry = ledger.entry(&key);
        if entry.and_then(|e| e.verdict) != Some(Verdict::Marked) {
            changes.push(Change::verdict(key.clone(), Some(Verdict::Marked)));
        }
        let shapes: Vec<DrawnShape> = members
            .iter()
            .map(|m| DrawnShape { label: label.clone(), shape: Shape::Rect { bbox: m.bbox.map(|v| v as f64) } })
            .filter(|s| !entry.is_some_and(|e| e.drawn.contains(s)))
            .collect();
        if !shapes.is_empty() {
            changes.push(Change::now(key, Edit::AddDrawn { shapes, image_size: Some(members[0].image_size) }));
        }
    }
    (changes, outside)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keys_exclusions_drawn_regions_and_verdicts_follow_the_ledger() {
        let dir = tempfile::tempdir().unwrap();
        let images = dir.path().join("images");
        let item = |rel: &str| Item { rel: rel.into(), path: images.join(rel), group: "g".into() };
        let mut items = vec![item("a.png"), item("b.png"), item("c.png")];
        let mut ledger = Ledger::new(&images.join("spurion-ledger.json"), None).unwrap();
        ledger.apply(&Change::verdict("a.png", Some(Verdict::Exclude)));
        ledger.apply(&Change::verdict("b.png", Some(Verdict::Marked)));
        let shape = DrawnShape { label: "tag".into(), shape: Shape::Rect { bbox: [1.0, 1.0, 4.0, 3.0] } };
        ledger.apply(&Change::now("b.png", Edit::AddDrawn { shapes: vec![shape.clone()], image_size: Some([8, 8]) }));
        // An image outside the ledger's root has no key, so nothing of the ledger applies to it.
        items.push(Item { rel: "d.png".into(), path: dir.path().join("elsewhere/d.png"), group: "g".into() });

        let s = SweepLedger::new(&ledger, &items);
        assert_eq!(s.keys.len(), 3);
        assert_eq!(s.drawn(), BTreeMap::from([("b.png".to_string(), DrawnFile::new(Some([8, 8]), vec![shape]))]));
        let mut kept = items.clone();
        assert_eq!(s.leave_out_excluded(&mut kept), 1);
        assert_eq!(kept.iter().map(|i| i.rel.as_str()).collect::<Vec<_>>(), ["b.png", "c.png", "d.png"]);
        let row = |p: &str| Row { path: p.into(), ..crate::sweep::row::tests::blank() };
        let mut rows = vec![row("b.png"), row("c.png"), row("d.png")];
        s.set_verdicts(&mut rows);
        assert_eq!(rows.iter().map(|r| r.verdict.clone()).collect::<Vec<_>>(), [Some("marked".to_string()), None, None]);
    }
}
