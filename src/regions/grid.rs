//! Small image-processing pieces shared by the finders, written on flat row-major slices so the
//! dev profile (no optimisation of this crate) stays fast enough.

use ndarray::Array2;

/// Row-major copy of an image as (height, width, values).
pub(crate) fn flat(image: &Array2<f32>) -> (usize, usize, Vec<f32>) {
    let (h, w) = image.dim();
    let v = match image.as_slice() {
        Some(s) => s.to_vec(),
        None => image.iter().copied().collect(),
    };
    (h, w, v)
}

/// Mean over a (2r+1)² window clipped at the image edge, from an integral image.
pub(crate) fn box_mean(h: usize, w: usize, v: &[f32], r: usize) -> Vec<f32> {
    let mut ii = vec![0f64; (h + 1) * (w + 1)];
    for y in 0..h {
        let mut row = 0f64;
        for x in 0..w {
            row += v[y * w + x] as f64;
            ii[(y + 1) * (w + 1) + x + 1] = ii[y * (w + 1) + x + 1] + row;
        }
    }
    let mut out = vec![0f32; h * w];
    for y in 0..h {
        let y0 = y.saturating_sub(r);
        let y1 = (y + r + 1).min(h);
        for x in 0..w {
            let x0 = x.saturating_sub(r);
            let x1 = (x + r + 1).min(w);
            let s = ii[y1 * (w + 1) + x1] - ii[y0 * (w + 1) + x1] - ii[y1 * (w + 1) + x0]
                + ii[y0 * (w + 1) + x0];
            out[y * w + x] = (s / ((y1 - y0) * (x1 - x0)) as f64) as f32;
        }
    }
    out
}

/// 8-connected components of `on`. Returns a label per pixel (0 = off, 1.. = component) and the
/// number of components.
pub(crate) fn components(h: usize, w: usize, on: &[bool]) -> (Vec<u32>, usize) {
    let mut label = vec![0u32; h * w];
    let mut next = 0u32;
    let mut stack = Vec::new();
    for start in 0..h * w {
        if !on[start] || label[start] != 0 {
            continue;
        }
        next += 1;
        label[start] = next;
        stack.push(start);
        while let Some(p) = stack.pop() {
            let (y, x) = (p / w, p % w);
            for dy in -1i64..=1 {
                for dx in -1i64..=1 {
                    let (ny, nx) = (y as i64 + dy, x as i64 + dx);
                    if ny < 0 || nx < 0 || ny >= h as i64 || nx >= w as i64 {
                        continue;
                    }
                    let q = ny as usize * w + nx as usize;
                    if on[q] && label[q] == 0 {
                        label[q] = next;
                        stack.push(q);
                    }
                }
            }
        }
    }
    (label, next as usize)
}

/// Square dilation by `r` pixels (separable: rows then columns).
pub(crate) fn dilate(h: usize, w: usize, on: &[bool], r: usize) -> Vec<bool> {
    if r == 0 {
        return on.to_vec();
    }
    let mut tmp = vec![false; h * w];
    for y in 0..h {
        // Distance since the last set pixel, scanning both ways.
        let row = &on[y * w..(y + 1) * w];
        let mut last: Option<usize> = None;
        for x in 0..w {
            if row[x] {
                last = Some(x);
            }
            if matches!(last, Some(l) if x - l <= r) {
                tmp[y * w + x] = true;
            }
        }
        last = None;
        for x in (0..w).rev() {
            if row[x] {
                last = Some(x);
            }
            if matches!(last, Some(l) if l - x <= r) {
                tmp[y * w + x] = true;
            }
        }
    }
    let mut out = vec![false; h * w];
    for x in 0..w {
        let mut last: Option<usize> = None;
        for y in 0..h {
            if tmp[y * w + x] {
                last = Some(y);
            }
            if matches!(last, Some(l) if y - l <= r) {
                out[y * w + x] = true;
            }
        }
        last = None;
        for y in (0..h).rev() {
            if tmp[y * w + x] {
                last = Some(y);
            }
            if matches!(last, Some(l) if l - y <= r) {
                out[y * w + x] = true;
            }
        }
    }
    out
}

/// Median of a small slice (sorts a copy).
pub(crate) fn median(v: &[f32]) -> f32 {
    if v.is_empty() {
        return 0.0;
    }
    let mut s = v.to_vec();
    s.sort_by(|a, b| a.total_cmp(b));
    let n = s.len();
    if n % 2 == 1 { s[n / 2] } else { 0.5 * (s[n / 2 - 1] + s[n / 2]) }
}

/// Flat mask into an `Array2<bool>`.
pub(crate) fn to_mask(h: usize, w: usize, on: Vec<bool>) -> Array2<bool> {
    Array2::from_shape_vec((h, w), on).expect("mask length matches h*w")
}
