//! The recurring hotspots in a sweep's report: one line per cluster with its exemplars cut out
//! of their images, its size, the groups and classes it comes from and its removal flip rate.

use std::fmt::Write as _;
use std::path::Path;

use anyhow::Result;

use super::pictures::png_bytes;
use crate::feed::Picture;
use crate::sweep::{RecurringHotspot, recurring::Member};

/// A member's hotspot cut out of its image with a margin of half the box's size (at least 6
/// pixels), scaled to 72 pixels on its longer side (nearest when growing, area averaging when
/// shrinking), its box outlined. `None` when the image no longer opens or is not the size the
/// hotspot was found on.
pub fn exemplar_picture(images_root: &Path, m: &Member) -> Option<image::RgbImage> {
    const SIDE: f32 = 72.0;
    let lum = Picture::open(&images_root.join(&m.path)).ok()?.luminance();
    let (h, w) = lum.dim();
    if [w, h] != m.image_size {
        return None;
    }
    let [x0, y0, x1, y1] = m.bbox;
    let pad = ((x1 - x0).max(y1 - y0) / 2).max(6);
    let (cx0, cy0, cx1, cy1) = (x0.saturating_sub(pad), y0.saturating_sub(pad), (x1 + pad).min(w), (y1 + pad).min(h));
    let crop = image::GrayImage::from_fn((cx1 - cx0) as u32, (cy1 - cy0) as u32, |x, y| {
        image::Luma([(lum[[cy0 + y as usize, cx0 + x as usize]].clamp(0.0, 1.0) * 255.0).round() as u8])
    });
    let k = SIDE / (cx1 - cx0).max(cy1 - cy0).max(1) as f32;
    let (nw, nh) = (((cx1 - cx0) as f32 * k).round().max(1.0) as u32, ((cy1 - cy0) as f32 * k).round().max(1.0) as u32);
    let filter = if k >= 1.0 { image::imageops::FilterType::Nearest } else { image::imageops::FilterType::Triangle };
    let small = image::imageops::resize(&crop, nw, nh, filter);
    let mut out = image::RgbImage::from_fn(nw, nh, |x, y| {
        let v = small.get_pixel(x, y).0[0];
        image::Rgb([v, v, v])
    });
    let at = |v: usize, from: usize, n: u32| (((v - from) as f32 * k) as u32).min(n - 1);
    let (bx0, by0, bx1, by1) = (at(x0, cx0, nw), at(y0, cy0, nh), at(x1, cx0, nw), at(y1, cy0, nh));
    for x in bx0..=bx1 {
        out.put_pixel(x, by0, image::Rgb([240, 170, 40]));
        out.put_pixel(x, by1, image::Rgb([240, 170, 40]));
    }
    for y in by0..=by1 {
        out.put_pixel(bx0, y, image::Rgb([240, 170, 40]));
        out.put_pixel(bx1, y, image::Rgb([240, 170, 40]));
    }
    Some(out)
}

fn counts(m: &std::collections::BTreeMap<String, usize>) -> String {
    m.iter()
        .map(|(k, n)| format!("{} {n}", super::html::esc(k)))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The report's section on recurring hotspots.
pub fn section(h: &mut String, clusters: &[RecurringHotspot], images_root: &Path) -> Result<()> {
    writeln!(
        h,
        "<h2>Recurring hotspots</h2><p><small>The hotspots of all images (compact places that carry much of the supporting \
         attribution), clustered by place and appearance. A cluster that looks like a mark and whose removal flips the answer \
         is a shortcut the finders may not know; one that looks like anatomy is where the model finds its evidence. \
         <code>spurion ledger accept-cluster --sweep OUT --cluster N</code> marks all its images in the ledger.</small></p>"
    )?;
    if clusters.is_empty() {
        writeln!(h, "<p>None: no hotspot recurs in enough images.</p>")?;
        return Ok(());
    }
    writeln!(
        h,
        "<table><tr><th>#</th><th>exemplars</th><th>images</th><th>place</th><th>looks like a mark</th>\
         <th>removal flips the top class</th><th>groups</th><th>classes</th></tr>"
    )?;
    for c in clusters {
        let mut pics = String::new();
        for m in &c.exemplars {
            match exemplar_picture(images_root, m) {
                Some(img) => write!(
                    pics,
                    "<img class=\"pix\" src=\"{}\" title=\"{} {:?}\" alt=\"hotspot of {}\"> ",
                    super::html::data_uri(&png_bytes(&img)?),
                    super::html::esc(&m.path),
                    m.bbox,
                    super::html::esc(&m.path)
                )?,
                None => write!(pics, "<small>{}</small> ", super::html::esc(&m.path))?,
            }
        }
        let flips = match c.flip_rate {
            Some(i) => format!(
                "{} of {} · {:.0} % <small>({:.0}–{:.0})</small>",
                c.flips,
                c.tested,
                100.0 * i.estimate,
                100.0 * i.low,
                100.0 * i.high
            ),
            None => "not tested".into(),
        };
        let p = c.place;
        writeln!(
            h,
            "<tr><td><b>{}</b></td><td>{pics}</td><td>{} <small>({} hotspots)</small></td><td>{} <small>[{:.2}, {:.2}, {:.2}, {:.2}]</small></td>\
             <td>{} of {} <small>(mean mark-likeness {:.2}; {} suspect)</small></td><td>{flips}</td><td>{}</td><td>{}</td></tr>",
            c.id,
            c.images,
            c.hotspots,
            super::html::esc(&c.place_kind),
            p[0],
            p[1],
            p[2],
            p[3],
            c.look_like_mark,
            c.hotspots,
            c.mark_likeness,
            c.suspect,
            counts(&c.groups),
            counts(&c.classes)
        )?;
    }
    writeln!(h, "</table>")?;
    Ok(())
}
