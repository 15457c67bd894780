//! The plain image operations hotspots are made of: a Gaussian blur, a square closing,
//! connected parts, a chamfer distance transform, Otsu's threshold, quantiles and area
//! resampling. Every one is linear or near-linear in the pixel count, so large images cost
//! little.

use ndarray::Array2;

/// Gaussian blur with standard deviation `sigma` (pixels), separable, edges clamped. A sigma
/// under 0.3 returns the input.
pub fn gaussian(a: &Array2<f32>, sigma: f32) -> Array2<f32> {
    if sigma < 0.3 {
        return a.clone();
    }
    let r = (3.0 * sigma).ceil() as isize;
    let k: Vec<f32> = (-r..=r).map(|i| (-(i * i) as f32 / (2.0 * sigma * sigma)).exp()).collect();
    let s: f32 = k.iter().sum();
    let k: Vec<f32> = k.iter().map(|v| v / s).collect();
    separable(a, |line, out| {
        let n = line.len() as isize;
        for (i, o) in out.iter_mut().enumerate() {
            let mut acc = 0f32;
            for (j, w) in k.iter().enumerate() {
                let p = (i as isize + j as isize - r).clamp(0, n - 1);
                acc += w * line[p as usize];
            }
            *o = acc;
        }
    })
}

/// Applies a 1-D filter along rows, then along columns.
fn separable(a: &Array2<f32>, f: impl Fn(&[f32], &mut [f32])) -> Array2<f32> {
    let (h, w) = a.dim();
    let mut rows = Array2::zeros((h, w));
    let mut line = vec![0f32; w];
    let mut out = vec![0f32; w];
    for y in 0..h {
        for x in 0..w {
            line[x] = a[[y, x]];
        }
        f(&line, &mut out);
        for x in 0..w {
            rows[[y, x]] = out[x];
        }
    }
    let mut cols = Array2::zeros((h, w));
    let mut line = vec![0f32; h];
    let mut out = vec![0f32; h];
    for x in 0..w {
        for y in 0..h {
            line[y] = rows[[y, x]];
        }
        f(&line, &mut out);
        for y in 0..h {
            cols[[y, x]] = out[y];
        }
    }
    cols
}

/// Grey erosion: the minimum over a (2r+1)² square (the image's own pixels only).
pub fn grey_min(a: &Array2<f32>, r: usize) -> Array2<f32> {
    separable(a, |line, out| {
        let n = line.len();
        for (i, o) in out.iter_mut().enumerate() {
            *o = line[i.saturating_sub(r)..(i + r + 1).min(n)].iter().copied().fold(f32::INFINITY, f32::min);
        }
    })
}

/// Grey dilation: the maximum over a (2r+1)² square (the image's own pixels only).
pub fn grey_max(a: &Array2<f32>, r: usize) -> Array2<f32> {
    separable(a, |line, out| {
        let n = line.len();
        for (i, o) in out.iter_mut().enumerate() {
            *o = line[i.saturating_sub(r)..(i + r + 1).min(n)].iter().copied().fold(f32::NEG_INFINITY, f32::max);
        }
    })
}

/// Dilation by a (2r+1)² square.
pub fn dilate(m: &Array2<bool>, r: usize) -> Array2<bool> {
    if r == 0 {
        return m.clone();
    }
    let (h, w) = m.dim();
    let along = |get: &dyn Fn(usize) -> bool, n: usize, out: &mut Vec<bool>| {
        // Distance to the nearest true cell on each side, in one pass each way.
        out.clear();
        out.resize(n, false);
        let mut last: Option<usize> = None;
        for i in 0..n {
            if get(i) {
                last = Some(i);
            }
            out[i] = last.is_some_and(|l| i - l <= r);
        }
        let mut next: Option<usize> = None;
        for i in (0..n).rev() {
            if get(i) {
                next = Some(i);
            }
            out[i] |= next.is_some_and(|l| l - i <= r);
        }
    };
    let mut rows = Array2::from_elem((h, w), false);
    let mut buf = vec![];
    for y in 0..h {
        along(&|x| m[[y, x]], w, &mut buf);
        for x in 0..w {
            rows[[y, x]] = buf[x];
        }
    }
    let mut out = Array2::from_elem((h, w), false);
    for x in 0..w {
        along(&|y| rows[[y, x]], h, &mut buf);
        for y in 0..h {
            out[[y, x]] = buf[y];
        }
    }
    out
}

/// Erosion by a (2r+1)² square. Outside the image counts as true, so a part touching the
/// image edge is not eaten from the edge (a corner mark stays whole after a closing).
pub fn erode(m: &Array2<bool>, r: usize) -> Array2<bool> {
    let inv = m.mapv(|v| !v);
    dilate(&inv, r).mapv(|v| !v)
}

/// Closing (dilation then erosion) by a (2r+1)² square: joins parts closer than about 2r and
/// fills holes narrower than that.
pub fn close(m: &Array2<bool>, r: usize) -> Array2<bool> {
    erode(&dilate(m, r), r)
}

/// The 8-connected parts of a mask, each as the list of its pixels (row, column) in raster
/// order, parts in the order of their first pixel (the regions' own labelling,
/// [`crate::regions::grid::components`]).
pub fn components(m: &Array2<bool>) -> Vec<Vec<(usize, usize)>> {
    let (h, w) = m.dim();
    let on: Vec<bool> = m.iter().copied().collect();
    let (label, n) = crate::regions::grid::components(h, w, &on);
    let mut out = vec![Vec::new(); n];
    for (p, &l) in label.iter().enumerate() {
        if l > 0 {
            out[l as usize - 1].push((p / w, p % w));
        }
    }
    out
}

/// Distance (pixels) of each true pixel to the nearest false one, by the 3-4 chamfer (Borgefors
/// 1986, "Distance transformations in digital images"; within about 8 % of the Euclidean
/// distance). False pixels get 0; outside the image counts as false.
pub fn distance(m: &Array2<bool>) -> Array2<f32> {
    let (h, w) = m.dim();
    let big = u32::MAX / 4;
    let mut d = Array2::from_shape_fn((h, w), |(y, x)| if m[[y, x]] { big } else { 0 });
    let get = |d: &Array2<u32>, y: isize, x: isize| -> u32 {
        if y < 0 || x < 0 || y >= h as isize || x >= w as isize { 0 } else { d[[y as usize, x as usize]] }
    };
    for y in 0..h as isize {
        for x in 0..w as isize {
            let v = d[[y as usize, x as usize]];
            if v == 0 {
                continue;
            }
            let c = [get(&d, y, x - 1) + 3, get(&d, y - 1, x) + 3, get(&d, y - 1, x - 1) + 4, get(&d, y - 1, x + 1) + 4];
            d[[y as usize, x as usize]] = c.into_iter().fold(v, u32::min);
        }
    }
    for y in (0..h as isize).rev() {
        for x in (0..w as isize).rev() {
            let v = d[[y as usize, x as usize]];
            if v == 0 {
                continue;
            }
            let c = [get(&d, y, x + 1) + 3, get(&d, y + 1, x) + 3, get(&d, y + 1, x + 1) + 4, get(&d, y + 1, x - 1) + 4];
            d[[y as usize, x as usize]] = c.into_iter().fold(v, u32::min);
        }
    }
    d.mapv(|v| v as f32 / 3.0)
}

/// Otsu's threshold (Otsu 1979, "A threshold selection method from gray-level histograms") on
/// 256 bins over the values' range, with its separability η = between-class variance / total
/// variance (0..1). `None` for a constant image.
pub fn otsu(a: &Array2<f32>) -> Option<(f32, f32)> {
    let (lo, hi) = a.iter().fold((f32::INFINITY, f32::NEG_INFINITY), |(l, h), &v| (l.min(v), h.max(v)));
    if !(hi > lo) {
        return None;
    }
    let bins = 256usize;
    let mut hist = vec![0f64; bins];
    let scale = (bins - 1) as f32 / (hi - lo);
    for &v in a.iter() {
        hist[((v - lo) * scale).round() as usize] += 1.0;
    }
    let n: f64 = hist.iter().sum();
    let mu: f64 = hist.iter().enumerate().map(|(i, c)| i as f64 * c).sum::<f64>() / n;
    let var: f64 = hist.iter().enumerate().map(|(i, c)| (i as f64 - mu).powi(2) * c).sum::<f64>() / n;
    let (mut w0, mut s0) = (0f64, 0f64);
    let (mut best, mut best_t) = (-1f64, 0usize);
    for (t, c) in hist.iter().enumerate().take(bins - 1) {
        w0 += c / n;
        s0 += t as f64 * c / n;
        let w1 = 1.0 - w0;
        if w0 <= 0.0 || w1 <= 0.0 {
            continue;
        }
        let m0 = s0 / w0;
        let m1 = (mu - s0) / w1;
        let between = w0 * w1 * (m0 - m1).powi(2);
        if between > best {
            best = between;
            best_t = t;
        }
    }
    let eta = if var > 0.0 { (best / var) as f32 } else { 0.0 };
    Some((lo + (best_t as f32 + 0.5) / scale, eta))
}

/// The q-quantile (0..1) of `v` by nearest rank; `None` when empty.
pub fn quantile(v: &mut [f32], q: f64) -> Option<f32> {
    if v.is_empty() {
        return None;
    }
    let k = ((v.len() - 1) as f64 * q.clamp(0.0, 1.0)).round() as usize;
    let (_, x, _) = v.select_nth_unstable_by(k, |a, b| a.total_cmp(b));
    Some(*x)
}

/// Gradient magnitude by central differences (one-sided at the edges).
pub fn gradient(a: &Array2<f32>) -> Array2<f32> {
    let (h, w) = a.dim();
    Array2::from_shape_fn((h, w), |(y, x)| {
        let gx = (a[[y, (x + 1).min(w - 1)]] - a[[y, x.saturating_sub(1)]]) / ((x + 1).min(w - 1) - x.saturating_sub(1)).max(1) as f32;
        let gy = (a[[(y + 1).min(h - 1), x]] - a[[y.saturating_sub(1), x]]) / ((y + 1).min(h - 1) - y.saturating_sub(1)).max(1) as f32;
        (gx * gx + gy * gy).sqrt()
    })
}

/// The box `[x0, y0, x1, y1]` of `a` resampled to n×n by area averaging (bilinear sampling of
/// cell centres when the box is smaller than n).
pub fn resample_box(a: &Array2<f32>, b: [usize; 4], n: usize) -> Vec<f32> {
    let (bw, bh) = ((b[2] - b[0]).max(1) as f32, (b[3] - b[1]).max(1) as f32);
    let mut out = Vec::with_capacity(n * n);
    for j in 0..n {
        for i in 0..n {
            // The cell's extent in box pixels; at least one sample per cell.
            let (y0, y1) = (j as f32 * bh / n as f32, (j + 1) as f32 * bh / n as f32);
            let (x0, x1) = (i as f32 * bw / n as f32, (i + 1) as f32 * bw / n as f32);
            let ys = (y0.floor() as usize)..((y1.ceil() as usize).max(y0.floor() as usize + 1));
            let xs = (x0.floor() as usize)..((x1.ceil() as usize).max(x0.floor() as usize + 1));
            let (mut s, mut c) = (0f32, 0f32);
            for y in ys {
                for x in xs.clone() {
                    let (py, px) = ((b[1] + y).min(b[3] - 1), (b[0] + x).min(b[2] - 1));
                    s += a[[py, px]];
                    c += 1.0;
                }
            }
            out.push(s / c);
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn closing_joins_near_parts_and_keeps_far_ones() {
        let mut m = Array2::from_elem((20, 30), false);
        for x in 2..6 {
            m[[5, x]] = true;
        }
        for x in 8..12 {
            m[[5, x]] = true; // gap of 2
        }
        for x in 22..26 {
            m[[5, x]] = true; // gap of 10
        }
        assert_eq!(components(&m).len(), 3);
        assert_eq!(components(&close(&m, 1)).len(), 2);
    }

    #[test]
    fn chamfer_distance_of_a_bar_is_its_half_width() {
        let m = Array2::from_shape_fn((20, 20), |(y, _)| (5..11).contains(&y));
        let d = distance(&m);
        // A 6-pixel bar: the middle rows are 3 pixels from the nearest outside pixel.
        assert!((d[[7, 10]] - 3.0).abs() < 1e-6 && (d[[5, 10]] - 1.0).abs() < 1e-6);
    }

    #[test]
    fn otsu_splits_two_levels() {
        let a = Array2::from_shape_fn((10, 10), |(y, _)| if y < 5 { 0.2 } else { 0.8 });
        let (t, eta) = otsu(&a).unwrap();
        assert!(t > 0.2 && t < 0.8 && eta > 0.99, "{t} {eta}");
    }

    #[test]
    fn blur_keeps_a_constant() {
        let a = Array2::from_elem((7, 9), 0.4f32);
        assert!(gaussian(&a, 2.0).iter().all(|v| (v - 0.4).abs() < 1e-6));
    }
}
