//! Recurring hotspots: the hotspots of all of a sweep's images, clustered by place and by
//! appearance, so that a mark no finder knows shows up as one cluster of many images (in the
//! spirit of spectral relevance analysis, Lapuschkin et al., Nature Communications 2019, which
//! clusters a dataset's attribution maps to find the strategies a model uses).
//!
//! Two hotspots are alike when they lie at one place *and* look alike, or when they look very
//! much alike wherever they lie (a side letter written into whichever corner). The clustering
//! is agglomerative with average linkage (the `kodama` crate, a port of fastcluster), cut where
//! the average dissimilarity between two clusters reaches 1 in the units below. A cluster is
//! listed when its hotspots come from enough images. The radii are starting points chosen by
//! us, not calibrated values.

use std::collections::{BTreeMap, BTreeSet};

use serde::{Deserialize, Serialize};

use super::row::Row;
use super::stats::{Interval, wilson};
use crate::regions::HotspotReport;

/// How hotspots are clustered and which clusters are listed.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct RecurringSettings {
    /// Hotspots whose box centres lie this far apart (as a fraction of the image's width and
    /// height) are at the edge of being one place. Default 0.08.
    pub place_radius: f32,
    /// Appearance distance at the edge of looking alike (see [`look_distance`]). Default 0.5.
    pub look_radius: f32,
    /// Hotspots this alike join wherever they lie. Default 0.25.
    pub look_alone: f32,
    /// A cluster is listed when its hotspots come from at least this many images... Default 3.
    pub min_images: usize,
    /// ... and at least this share of the sweep's images. Default 0.02.
    pub min_share: f64,
    /// At most this many hotspots are clustered (the images' first hotspots, in path order), to
    /// bound time and memory (the pairwise table grows with the square). Default 2000.
    pub max_hotspots: usize,
    /// Exemplars shown per cluster. Default 4.
    pub exemplars: usize,
}

impl Default for RecurringSettings {
    fn default() -> Self {
        RecurringSettings {
            place_radius: 0.08,
            look_radius: 0.5,
            look_alone: 0.25,
            min_images: 3,
            min_share: 0.02,
            max_hotspots: 2000,
            exemplars: 4,
        }
    }
}

/// One hotspot of a cluster: which image, where.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Member {
    /// The image, relative to the sweep's images folder.
    pub path: String,
    pub group: String,
    /// Which of the image's hotspots (its index in the row's list).
    pub hotspot: usize,
    /// `[x0, y0, x1, y1]` in the image's pixels.
    #[serde(rename = "box")]
    pub bbox: [usize; 4],
    /// `[width, height]` of the image.
    pub image_size: [usize; 2],
    pub mark_likeness: f32,
    /// Whether painting this hotspot out changed the image's top class (absent when untested).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub flipped: Option<bool>,
}

/// A cluster of hotspots that recurs across the sweep's images.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct RecurringHotspot {
    /// 1, 2, … in order of the number of images, largest first.
    pub id: usize,
    /// Images with at least one hotspot in the cluster, and hotspots in it.
    pub images: usize,
    pub hotspots: usize,
    /// The median box, as fractions `[x0, y0, x1, y1]` of the image's width and height.
    pub place: [f32; 4],
    /// Where most of its hotspots lie: corner, border or interior.
    pub place_kind: String,
    /// Mean mark-likeness of its hotspots, and how many look like a mark.
    pub mark_likeness: f32,
    pub look_like_mark: usize,
    /// Hotspots the reading called suspect.
    pub suspect: usize,
    /// Images per group, and per top class (the model's answer on the image).
    pub groups: BTreeMap<String, usize>,
    pub classes: BTreeMap<String, usize>,
    /// Hotspots tested by removal, how many of those flipped the top class, and the rate with
    /// Wilson's 95 % interval.
    pub tested: usize,
    pub flips: usize,
    pub flip_rate: Option<Interval>,
    /// The members nearest the cluster's middle (one per image), to look at first.
    pub exemplars: Vec<Member>,
    pub members: Vec<Member>,
}

struct Point<'a> {
    row: &'a Row,
    index: usize,
    h: &'a HotspotReport,
}

/// Scales of the six figures at the end of an appearance vector (mean and standard deviation
/// of luminance, saturation, edge sharpness, thinness, log2 aspect): a difference of this much
/// counts as clearly different.
const FIGURE_SCALE: [f32; 6] = [0.15, 0.1, 0.3, 0.3, 0.3, 1.0];

/// How differently two hotspots look, from their appearance vectors (`regions::hotspot`'s
/// `appearance`: an 8×8 patch normalised to mean 0 and deviation 1, then six figures). The
/// patch part is the root mean square difference over √2 (0 for the same pattern, 1 for
/// uncorrelated ones); the figure part the root mean square of the differences over
/// [`FIGURE_SCALE`]; the distance is the root mean square of the two parts. Vectors of other
/// lengths are as different as can be.
pub fn look_distance(a: &[f32], b: &[f32]) -> f32 {
    if a.len() != b.len() || a.len() < FIGURE_SCALE.len() {
        return f32::INFINITY;
    }
    let k = a.len() - FIGURE_SCALE.len();
    let patch = if k == 0 {
        0.0
    } else {
        (a[..k]
            .iter()
            .zip(&b[..k])
            .map(|(x, y)| (x - y) * (x - y))
            .sum::<f32>()
            / (2 * k) as f32)
            .sqrt()
    };
    let figures = (a[k..]
        .iter()
        .zip(&b[k..])
        .zip(FIGURE_SCALE)
        .map(|((x, y), s)| ((x - y) / s).powi(2))
        .sum::<f32>()
        / FIGURE_SCALE.len() as f32)
        .sqrt();
    ((patch * patch + figures * figures) / 2.0).sqrt()
}

/// The dissimilarity of two hotspots, in units where 1 is the edge of one cluster: alike at one
/// place (the larger of place and look distance, each over its radius), or alike in look alone
/// (look distance over `look_alone`), whichever is closer.
pub fn dissimilarity(a: &HotspotReport, b: &HotspotReport, s: &RecurringSettings) -> f32 {
    let (ca, cb) = (a.descriptor.centre, b.descriptor.centre);
    let place =
        ((ca[0] - cb[0]).powi(2) + (ca[1] - cb[1]).powi(2)).sqrt() / s.place_radius.max(1e-6);
    let look = look_distance(&a.appearance, &b.appearance);
    let both = place.max(look / s.look_radius.max(1e-6));
    let alone = look / s.look_alone.max(1e-6);
    // kodama needs finite values; anything past 1e6 is simply far.
    both.min(alone).min(1e6)
}

/// Clusters the hotspots of `rows` and lists the clusters that recur.
pub fn find_recurring(rows: &[Row], s: &RecurringSettings) -> Vec<RecurringHotspot> {
    let points: Vec<Point> = rows
        .iter()
        .flat_map(|r| {
            r.hotspots
                .iter()
                .enumerate()
                .map(move |(index, h)| Point { row: r, index, h })
        })
        .take(s.max_hotspots)
        .collect();
    let n = points.len();
    if n < 2 {
        return vec![];
    }
    let mut condensed = Vec::with_capacity(n * (n - 1) / 2);
    for a in 0..n {
        for b in a + 1..n {
            condensed.push(dissimilarity(points[a].h, points[b].h, s) as f64);
        }
    }
    let dendrogram = kodama::linkage(&mut condensed.clone(), n, kodama::Method::Average);
    // Merge along the dendrogram while the clusters' average dissimilarity stays under 1.
    let mut parent: Vec<usize> = (0..2 * n).collect();
    fn root(parent: &mut [usize], mut i: usize) -> usize {
        while parent[i] != i {
            parent[i] = parent[parent[i]];
            i = parent[i];
        }
        i
    }
    for (k, step) in dendrogram.steps().iter().enumerate() {
        if step.dissimilarity >= 1.0 {
            break;
        }
        let (a, b) = (
            root(&mut parent, step.cluster1),
            root(&mut parent, step.cluster2),
        );
        parent[a] = n + k;
        parent[b] = n + k;
    }
    let mut clusters: BTreeMap<usize, Vec<usize>> = BTreeMap::new();
    for i in 0..n {
        clusters.entry(root(&mut parent, i)).or_default().push(i);
    }
    let total_images = rows.len();
    let at = |a: usize, b: usize| {
        let (a, b) = if a < b { (a, b) } else { (b, a) };
        condensed[n * a - a * (a + 1) / 2 + b - a - 1]
    };
    let mut out: Vec<RecurringHotspot> = clusters
        .into_values()
        .filter_map(|idx| {
            let images: BTreeSet<&str> = idx.iter().map(|&i| points[i].row.path.as_str()).collect();
            if images.len() < s.min_images
                || (images.len() as f64) < s.min_share * total_images as f64
            {
                return None;
            }
            Some(summarise_cluster(&points, &idx, images.len(), s, &at))
        })
        .collect();
    out.sort_by(|a, b| {
        b.images
            .cmp(&a.images)
            .then(b.hotspots.cmp(&a.hotspots))
            .then(a.members[0].path.cmp(&b.members[0].path))
    });
    for (k, c) in out.iter_mut().enumerate() {
        c.id = k + 1;
    }
    out
}

fn summarise_cluster(
    points: &[Point],
    idx: &[usize],
    images: usize,
    s: &RecurringSettings,
    at: &dyn Fn(usize, usize) -> f64,
) -> RecurringHotspot {
    let member = |i: usize| {
        let p = &points[i];
        Member {
            path: p.row.path.clone(),
            group: p.row.group.clone(),
            hotspot: p.index,
            bbox: p.h.bbox,
            image_size: p.h.image_size,
            mark_likeness: p.h.mark_likeness,
            flipped: p.h.flipped,
        }
    };
    let per_image = |f: &dyn Fn(&Row) -> String| {
        let mut seen = BTreeSet::new();
        let mut m: BTreeMap<String, usize> = BTreeMap::new();
        for &i in idx {
            if seen.insert(points[i].row.path.as_str()) {
                *m.entry(f(points[i].row)).or_default() += 1;
            }
        }
        m
    };
    let groups = per_image(&|r| r.group.clone());
    let classes = per_image(&|r| r.top_label.clone());
    let median = |k: usize| {
        let mut v: Vec<f32> = idx
            .iter()
            .map(|&i| points[i].h.descriptor.box_fraction[k])
            .collect();
        v.sort_by(|a, b| a.total_cmp(b));
        v[v.len() / 2]
    };
    let mut kinds: BTreeMap<&str, usize> = BTreeMap::new();
    for &i in idx {
        *kinds
            .entry(points[i].h.descriptor.place.name())
            .or_default() += 1;
    }
    let place_kind = kinds
        .iter()
        .max_by_key(|(_, c)| **c)
        .map(|(k, _)| k.to_string())
        .unwrap_or_default();
    let tested = idx
        .iter()
        .filter(|&&i| points[i].h.flipped.is_some())
        .count();
    let flips = idx
        .iter()
        .filter(|&&i| points[i].h.flipped == Some(true))
        .count();
    // Exemplars: the members with the least mean dissimilarity to the others (among the first
    // 300, to bound the work), one per image.
    let head = &idx[..idx.len().min(300)];
    let mut central: Vec<(f64, usize)> = head
        .iter()
        .map(|&i| {
            (
                head.iter()
                    .filter(|&&j| j != i)
                    .map(|&j| at(i, j))
                    .sum::<f64>(),
                i,
            )
        })
        .collect();
    central.sort_by(|a, b| a.0.total_cmp(&b.0).then(a.1.cmp(&b.1)));
    let mut shown = BTreeSet::new();
    let exemplars = central
        .iter()
        .filter(|(_, i)| shown.insert(points[*i].row.path.as_str()))
        .take(s.exemplars)
        .map(|(_, i)| member(*i))
        .collect();
    RecurringHotspot {
        id: 0,
        images,
        hotspots: idx.len(),
        place: [median(0), median(1), median(2), median(3)],
        place_kind,
        mark_likeness: idx.iter().map(|&i| points[i].h.mark_likeness).sum::<f32>()
            / idx.len() as f32,
        look_like_mark: idx.iter().filter(|&&i| points[i].h.looks_like_mark).count(),
        suspect: idx.iter().filter(|&&i| points[i].h.suspect).count(),
        groups,
        classes,
        tested,
        flips,
        flip_rate: wilson(flips, tested),
        exemplars,
        members: idx.iter().map(|&i| member(i)).collect(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::regions::HotspotRole;
    use crate::regions::hotspot::{Descriptor, Place};
    use rand::{Rng, SeedableRng};

    /// A hotspot of a 256×256 image at `bbox` whose appearance is `pattern` plus noise of
    /// `noise` (the patch part) and the given figures.
    fn hotspot(
        bbox: [usize; 4],
        pattern: &[f32],
        figures: [f32; 6],
        noise: f32,
        rng: &mut rand_chacha::ChaCha8Rng,
    ) -> HotspotReport {
        let f = |v: usize| v as f32 / 256.0;
        let box_fraction = [f(bbox[0]), f(bbox[1]), f(bbox[2]), f(bbox[3])];
        let centre = [
            (box_fraction[0] + box_fraction[2]) / 2.0,
            (box_fraction[1] + box_fraction[3]) / 2.0,
        ];
        let corner = (centre[0] < 0.2 || centre[0] > 0.8) && (centre[1] < 0.2 || centre[1] > 0.8);
        let descriptor = Descriptor {
            centre,
            box_fraction,
            place: if corner {
                Place::Corner
            } else {
                Place::Interior
            },
            edge_distance: 0.0,
            outside_foreground: 0.0,
            saturation: figures[2],
            edge_sharpness: figures[3],
            stroke_width_px: 2.0,
            thinness: figures[4],
            area_fraction: 0.01,
        };
        let mut appearance: Vec<f32> = pattern
            .iter()
            .map(|v| v + noise * rng.random_range(-1.0f32..1.0))
            .collect();
        appearance.extend(figures);
        HotspotReport {
            bbox,
            image_size: [256, 256],
            share: 0.3,
            lift: 10.0,
            mark_likeness: descriptor.mark_likeness(),
            looks_like_mark: corner,
            descriptor,
            appearance,
            removal_area: 100,
            removal_confined: true,
            removal: None,
            stroke_removal: None,
            flipped: Some(corner),
            role: HotspotRole::Untested,
            suspect: false,
        }
    }

    fn pattern(rng: &mut rand_chacha::ChaCha8Rng) -> Vec<f32> {
        (0..64).map(|_| rng.random_range(-1.5f32..1.5)).collect()
    }

    #[test]
    fn hotspots_at_one_place_or_of_one_look_cluster_and_others_do_not() {
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(5);
        let (tag, letter) = (pattern(&mut rng), pattern(&mut rng));
        let (tag_fig, letter_fig) = (
            [0.7, 0.3, 0.6, 0.5, 0.6, 1.5],
            [0.6, 0.35, 0.5, 0.5, 0.7, -0.4],
        );
        let mut rows = vec![];
        for i in 0..40 {
            let mut r = crate::sweep::row::tests::blank();
            r.path = format!("img-{i:02}.png");
            r.group = ["a", "b"][i % 2].into();
            r.top_label = ["no finding", "finding present"][(i / 2) % 2].into();
            // Every image: one anatomy-like hotspot somewhere in the middle, looking like nothing else.
            let (x, y) = (rng.random_range(60..180), rng.random_range(60..180));
            let own = pattern(&mut rng);
            let fig = [
                rng.random_range(0.3..0.6),
                rng.random_range(0.05..0.2),
                0.0,
                rng.random_range(0.0..0.2),
                rng.random_range(0.0..0.3),
                rng.random_range(-0.5..0.5),
            ];
            r.hotspots
                .push(hotspot([x, y, x + 20, y + 20], &own, fig, 0.0, &mut rng));
            if i < 12 {
                // A tag at one place in the top-left corner, jittered by a pixel or two.
                let j = rng.random_range(0..3);
                r.hotspots.push(hotspot(
                    [8 + j, 8, 40 + j, 20],
                    &tag,
                    tag_fig,
                    0.15,
                    &mut rng,
                ));
            } else if i < 20 {
                // A letter in whichever corner.
                let (x, y) = [(10, 10), (230, 10), (10, 226), (230, 226)][i % 4];
                r.hotspots.push(hotspot(
                    [x, y, x + 14, y + 20],
                    &letter,
                    letter_fig,
                    0.15,
                    &mut rng,
                ));
            }
            rows.push(r);
        }
        let found = find_recurring(&rows, &RecurringSettings::default());
        for c in &found {
            eprintln!(
                "cluster {}: {} images, {} hotspots, place {:?} {}, groups {:?}",
                c.id, c.images, c.hotspots, c.place, c.place_kind, c.groups
            );
        }
        assert_eq!(found.len(), 2, "the tag and the letter, nothing else");
        let paths = |c: &RecurringHotspot| {
            c.members
                .iter()
                .map(|m| m.path.clone())
                .collect::<BTreeSet<_>>()
        };
        let want = |r: std::ops::Range<usize>| {
            r.map(|i| format!("img-{i:02}.png"))
                .collect::<BTreeSet<_>>()
        };
        assert_eq!(found[0].id, 1);
        assert_eq!(
            paths(&found[0]),
            want(0..12),
            "the tag's cluster is exactly its images"
        );
        assert!(found[0].members.iter().all(|m| m.hotspot == 1));
        assert_eq!(
            paths(&found[1]),
            want(12..20),
            "the letter joins across corners by its look"
        );
        // What a cluster says of itself.
        let c = &found[0];
        assert_eq!((c.images, c.hotspots, c.tested, c.flips), (12, 12, 12, 12));
        assert_eq!(
            c.groups,
            BTreeMap::from([("a".to_string(), 6), ("b".to_string(), 6)])
        );
        assert_eq!(c.classes.values().sum::<usize>(), 12);
        assert_eq!(c.place_kind, "corner");
        assert!(c.place[0] < 0.05 && c.place[3] < 0.1, "{:?}", c.place);
        assert_eq!(c.exemplars.len(), 4);
        assert!(c.flip_rate.unwrap().estimate == 1.0);
        // Fewer images than asked for: nothing listed.
        let strict = RecurringSettings {
            min_images: 13,
            ..RecurringSettings::default()
        };
        assert!(find_recurring(&rows, &strict).is_empty());
    }

    #[test]
    fn look_distance_is_zero_for_the_same_and_about_one_for_unrelated_patterns() {
        let norm = |p: Vec<f32>| {
            let m = p.iter().sum::<f32>() / p.len() as f32;
            let sd = (p.iter().map(|v| (v - m).powi(2)).sum::<f32>() / p.len() as f32).sqrt();
            let mut v: Vec<f32> = p.iter().map(|x| (x - m) / sd).collect();
            v.extend([0.5, 0.2, 0.0, 0.0, 0.0, 0.0]);
            v
        };
        let a = norm((0..64).map(|i| (i as f32 * 0.37).fract()).collect());
        let b = norm((0..64).map(|i| ((i * 7919) % 64) as f32).collect());
        assert_eq!(look_distance(&a, &a), 0.0);
        let d = look_distance(&a, &b);
        // Patch part near 1 for unrelated normalised patterns, figures equal: about 1/√2.
        assert!((0.5..0.9).contains(&d), "{d}");
        assert_eq!(look_distance(&a, &b[..10]), f32::INFINITY);
    }
}
