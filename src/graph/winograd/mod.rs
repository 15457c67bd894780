//! 3×3 stride-1 convolution by Winograd's minimal filtering F(2×2, 3×3) (Lavin and Gray, "Fast
//! Algorithms for Convolutional Neural Networks", CVPR 2016, section 4): each 2×2 output tile
//! costs 16 multiplications per channel pair instead of 36. The input is cut into overlapping
//! 4×4 tiles (stride 2), each tile and each 3×3 kernel goes to a 4×4 transform domain, and the
//! 16 transform positions are 16 independent matrix products [out × in] · [in × tiles], run with
//! tract's packed matrix kernels. The transforms hold only additions and halvings, so float32
//! rounding stays within a few units in the last place of the direct sum.
//!
//! Both the taped forward and the reverse step of such a convolution use it: the input gradient
//! of a 3×3 stride-1 convolution is again one, with the kernel flipped and its channel axes
//! swapped ([`Winograd::adjoint`]).

mod node;

use anyhow::{Result, anyhow, bail, ensure};
pub use node::{WinogradConv, count, for_conv, substitute, tiles};
use tract_onnx::prelude::*;
use tract_onnx::tract_core::tract_linalg::mmm::{
    AsInputValue, FusedSpec, MMMInputValue, MatMatMul, MmmDispatch, Query, retain_best,
};

/// One convolution's transformed kernel, ready to run on any input of its channel count.
#[derive(Clone, Debug)]
pub struct Winograd {
    out_ch: usize,
    in_ch: usize,
    /// Zero padding: top, left, bottom, right.
    pad: [usize; 4],
    bias: Option<Vec<f32>>,
    /// The kernel in the transform domain, [16][out][in], kept for the adjoint.
    u: Vec<f32>,
    mmm: Box<dyn MatMatMul>,
    packing: usize,
    /// The 16 transform positions' kernels packed for `mmm`.
    packed: Vec<Box<dyn MMMInputValue>>,
}

/// Kernel transform G g Gᵀ of one 3×3 kernel.
fn kernel_transform(g: &[f32]) -> [f32; 16] {
    // G = [[1,0,0],[½,½,½],[½,−½,½],[0,0,1]]; rows of G·g first.
    let mut t = [[0f32; 3]; 4];
    for c in 0..3 {
        let (a, b, d) = (g[c], g[3 + c], g[6 + c]);
        t[0][c] = a;
        t[1][c] = 0.5 * (a + b + d);
        t[2][c] = 0.5 * (a - b + d);
        t[3][c] = d;
    }
    let mut u = [0f32; 16];
    for r in 0..4 {
        let [a, b, d] = t[r];
        u[4 * r] = a;
        u[4 * r + 1] = 0.5 * (a + b + d);
        u[4 * r + 2] = 0.5 * (a - b + d);
        u[4 * r + 3] = d;
    }
    u
}

impl Winograd {
    /// From an OIHW kernel [out, in, 3, 3] (flat, row-major), an optional bias and the padding
    /// (top, left, bottom, right), for inputs whose output plane holds about `tiles_hint` tiles
    /// (it only guides the choice of matrix kernel).
    pub fn new(
        kernel: &[f32],
        out_ch: usize,
        in_ch: usize,
        bias: Option<Vec<f32>>,
        pad: [usize; 4],
        tiles_hint: usize,
    ) -> Result<Winograd> {
        ensure!(
            kernel.len() == out_ch * in_ch * 9,
            "Winograd: kernel is not [{out_ch}, {in_ch}, 3, 3]"
        );
        if let Some(b) = &bias {
            ensure!(
                b.len() == out_ch,
                "Winograd: bias of {} for {out_ch} channels",
                b.len()
            );
        }
        let mut u = vec![0f32; 16 * out_ch * in_ch];
        for o in 0..out_ch {
            for i in 0..in_ch {
                let t = kernel_transform(&kernel[(o * in_ch + i) * 9..][..9]);
                for (xi, v) in t.iter().enumerate() {
                    u[(xi * out_ch + o) * in_ch + i] = *v;
                }
            }
        }
        Self::from_transformed(u, out_ch, in_ch, bias, pad, tiles_hint)
    }

    fn from_transformed(
        u: Vec<f32>,
        out_ch: usize,
        in_ch: usize,
        bias: Option<Vec<f32>>,
        pad: [usize; 4],
        tiles_hint: usize,
    ) -> Result<Winograd> {
        let query = Query::plain(
            f32::datum_type(),
            Some(out_ch),
            Some(in_ch),
            Some(tiles_hint.max(2)),
        );
        let dispatch = MmmDispatch::native();
        let (mut mmm, mut packing, mut extractor) = dispatch
            .pick(&query)
            .ok_or_else(|| anyhow!("Winograd: tract has no float32 matrix kernel here"))?;
        // The products' inner dimension is the channel count alone (64 in ResNet's first
        // stage, not 9 × 64 as in im2col), and there a register tile twice as tall and half as
        // wide as tract's pick, from the same family, ran faster: `cargo bench --bench
        // winograd` with AVX-512's 32×6 instead of 16×12 took 0.50 and 0.60 of tract's
        // convolution time on 56² and 28² planes instead of 0.58–0.66 and 0.73–0.74. (It is
        // also the shape of the common BLIS single-precision micro-kernels, 6×16 and 6×32.)
        let mut family = dispatch.suitable(&query);
        retain_best(&mut family);
        let taller = family.into_iter().find(|(k, _, e)| {
            e.is_none() && k.mr() == 2 * mmm.mr() && 2 * k.nr() == mmm.nr()
        });
        if let Some(t) = taller {
            (mmm, packing, extractor) = t;
        }
        if extractor.is_some() {
            bail!("Winograd: the float32 matrix kernel needs a panel extractor");
        }
        let mut packed = Vec::with_capacity(16);
        for xi in 0..16 {
            let t = Tensor::from_shape(
                &[out_ch, in_ch],
                &u[xi * out_ch * in_ch..][..out_ch * in_ch],
            )
            .map_err(|e| anyhow!("{e}"))?;
            packed.push(
                mmm.packings()[packing]
                    .0
                    .prepare_one(&t, 1, 0)
                    .map_err(|e| anyhow!("{e}"))?,
            );
        }
        Ok(Winograd {
            out_ch,
            in_ch,
            pad,
            bias,
            u,
            mmm,
            packing,
            packed,
        })
    }

    /// The convolution whose output is this one's input gradient: the same transform-domain
    /// kernels with the channel axes swapped and the 4×4 positions mirrored (the 3×3 kernel
    /// flipped), padding 2 − p on each side, no bias.
    pub fn adjoint(&self, tiles_hint: usize) -> Result<Winograd> {
        let [t, l, b, r] = self.pad;
        ensure!(
            t <= 2 && l <= 2 && b <= 2 && r <= 2,
            "Winograd adjoint: padding over 2"
        );
        // Flipping g (J g J, J the 3×3 reversal) gives G J = P G with P swapping rows 0 and 3
        // of G (rows 1 and 2 are palindromes), so the flipped kernel's transform is P U Pᵀ.
        const P: [usize; 4] = [3, 1, 2, 0];
        let (o, i) = (self.out_ch, self.in_ch);
        let mut u = vec![0f32; 16 * o * i];
        for xi in 0..16 {
            let src = P[xi / 4] * 4 + P[xi % 4];
            for oo in 0..o {
                for ii in 0..i {
                    u[(xi * i + ii) * o + oo] = self.u[(src * o + oo) * i + ii];
                }
            }
        }
        Self::from_transformed(u, i, o, None, [2 - t, 2 - l, 2 - b, 2 - r], tiles_hint)
    }

    /// The name of tract's matrix kernel the 16 products run on.
    pub fn kernel_name(&self) -> String {
        self.mmm.name().to_string()
    }

    /// The number of output channels.
    pub fn out_channels(&self) -> usize {
        self.out_ch
    }

    /// The output's spatial size for an input of `h × w`.
    pub fn output_hw(&self, h: usize, w: usize) -> Result<(usize, usize)> {
        let [t, l, b, r] = self.pad;
        let (hp, wp) = (h + t + b, w + l + r);
        ensure!(
            hp >= 3 && wp >= 3,
            "Winograd: input {h}×{w} smaller than the kernel"
        );
        Ok((hp - 2, wp - 2))
    }

    /// Runs on `x` = [n, in, h, w] (flat, row-major) and returns [n, out, ho, wo].
    ///
    /// Tiles go through in chunks of whole tile rows, small enough that a chunk's transformed
    /// input and products stay in the core's cache between the three stages.
    pub fn run(&self, x: &[f32], n: usize, h: usize, w: usize) -> Result<Vec<f32>> {
        let (ho, wo) = self.output_hw(h, w)?;
        let mut y = vec![0f32; n * self.out_ch * ho * wo];
        self.run_into(x, n, h, w, &mut y)?;
        Ok(y)
    }

    /// As [`Winograd::run`], into `y` (every entry is written).
    ///
    /// The transforms are plain loops; the crate is built for the baseline x86-64 (SSE2), so
    /// they are compiled again for AVX-512 and for AVX2 and picked at run time.
    pub fn run_into(&self, x: &[f32], n: usize, h: usize, w: usize, y: &mut [f32]) -> Result<()> {
        #[cfg(target_arch = "x86_64")]
        {
            if std::arch::is_x86_feature_detected!("avx512f") {
                // SAFETY: the CPU has AVX-512F.
                return unsafe { self.run_avx512(x, n, h, w, y) };
            }
            if std::arch::is_x86_feature_detected!("avx2") {
                // SAFETY: the CPU has AVX2.
                return unsafe { self.run_avx2(x, n, h, w, y) };
            }
        }
        self.run_body(x, n, h, w, y)
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f")]
    unsafe fn run_avx512(
        &self,
        x: &[f32],
        n: usize,
        h: usize,
        w: usize,
        y: &mut [f32],
    ) -> Result<()> {
        self.run_body(x, n, h, w, y)
    }

    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    unsafe fn run_avx2(
        &self,
        x: &[f32],
        n: usize,
        h: usize,
        w: usize,
        y: &mut [f32],
    ) -> Result<()> {
        self.run_body(x, n, h, w, y)
    }

    #[inline(always)]
    fn run_body(&self, x: &[f32], n: usize, h: usize, w: usize, y: &mut [f32]) -> Result<()> {
        let (c, k) = (self.in_ch, self.out_ch);
        ensure!(
            x.len() == n * c * h * w,
            "Winograd: input is not [{n}, {c}, {h}, {w}]"
        );
        let (ho, wo) = self.output_hw(h, w)?;
        ensure!(
            y.len() == n * k * ho * wo,
            "Winograd: output is not [{n}, {k}, {ho}, {wo}]"
        );
        let (th, tw) = (ho.div_ceil(2), wo.div_ceil(2));
        let [pt, pl, _, _] = self.pad;

        // The zero-padded input, each row split into its even and its odd columns (so that a
        // tile's four columns are two neighbouring entries of each half).
        let (hp, cw) = (2 * th + 2, tw + 1);
        let mut xp = vec![0f32; n * c * hp * 2 * cw];
        for plane in 0..n * c {
            let src = &x[plane * h * w..][..h * w];
            for (yy, line) in src.chunks_exact(w).enumerate() {
                let py = yy + pt;
                if py >= hp {
                    break;
                }
                let (ev, od) = xp[(plane * hp + py) * 2 * cw..][..2 * cw].split_at_mut(cw);
                // Column xx sits at padded position xx + pl.
                let line = &line[..w.min(2 * cw - pl)];
                let off = pl / 2;
                let (first, second) = if pl % 2 == 0 {
                    (ev, od)
                } else {
                    (od, &mut ev[1..])
                };
                for ((pair, a), b) in line
                    .chunks(2)
                    .zip(&mut first[off..])
                    .zip(&mut second[off..])
                {
                    *a = pair[0];
                    if let Some(v) = pair.get(1) {
                        *b = *v;
                    }
                }
            }
        }

        let rows = n * th;
        // About 8192 / channels tiles a chunk: transformed input and products of 512 KB each at
        // most (the fastest of 2048..16384 on ResNet-18's planes, single thread).
        let per_chunk = (8192 / c.max(k)).max(12).div_ceil(tw).max(1);
        let most = per_chunk.min(rows) * tw;
        let mut q: [[Vec<f32>; 4]; 4] =
            std::array::from_fn(|_| std::array::from_fn(|_| vec![0f32; most]));
        let mut r: [[Vec<f32>; 4]; 2] =
            std::array::from_fn(|_| std::array::from_fn(|_| vec![0f32; most]));
        let mut pair = vec![0f32; 2 * tw];
        let mut buffers: Option<(usize, Tensor, Tensor)> = None;
        let (pack_b, mmm) = (&self.mmm.packings()[self.packing].1, &self.mmm);
        let mut scratch = unsafe { mmm.allocate_scratch_space() };
        for first in (0..rows).step_by(per_chunk) {
            let chunk = first..(first + per_chunk).min(rows);
            let nt = chunk.len() * tw;
            if buffers.as_ref().is_none_or(|b| b.0 != nt) {
                // Every entry of both is written before it is read.
                let v = unsafe { Tensor::uninitialized::<f32>(&[16, c, nt]) }
                    .map_err(|e| anyhow!("{e}"))?;
                let m = unsafe { Tensor::uninitialized::<f32>(&[16, k, nt]) }
                    .map_err(|e| anyhow!("{e}"))?;
                buffers = Some((nt, v, m));
            }
            let (_, v, m) = buffers.as_mut().expect("just set");

            // Input transform Bᵀ d B of the chunk's tiles, into V[16][in][nt].
            {
                let mut plain = v.try_as_plain_ram_mut().map_err(|e| anyhow!("{e}"))?;
                let vs = plain.as_slice_mut::<f32>().map_err(|e| anyhow!("{e}"))?;
                let vplane = c * nt;
                let combine = |q: &mut [f32], p: &[f32], m: &[f32], sign: f32| {
                    for ((q, p), m) in q.iter_mut().zip(p).zip(m) {
                        *q = p + sign * m;
                    }
                };
                for ch in 0..c {
                    // Column transform of each tile row's 4 input rows, (d0 − d2, d1 + d2,
                    // d2 − d1, d1 − d3), into runs of the whole chunk.
                    for (ri, row) in chunk.clone().enumerate() {
                        let (img, ti) = (row / th, row % th);
                        let plane = img * c + ch;
                        for (rr, qr) in q.iter_mut().enumerate() {
                            let line = &xp[(plane * hp + 2 * ti + rr) * 2 * cw..][..2 * cw];
                            let (ev, od) = line.split_at(cw);
                            let (e0, e1, o0, o1) = (&ev[..tw], &ev[1..=tw], &od[..tw], &od[1..=tw]);
                            let [q0, q1, q2, q3] = qr;
                            let at = ri * tw;
                            combine(&mut q0[at..at + tw], e0, e1, -1.0);
                            combine(&mut q1[at..at + tw], o0, e1, 1.0);
                            combine(&mut q2[at..at + tw], e1, o0, -1.0);
                            combine(&mut q3[at..at + tw], o0, o1, -1.0);
                        }
                    }
                    // Row transform across the 4 rows: one contiguous run of nt tiles per ξ.
                    let at = ch * nt;
                    for col in 0..4 {
                        let (a, b, e, f) = (
                            &q[0][col][..nt],
                            &q[1][col][..nt],
                            &q[2][col][..nt],
                            &q[3][col][..nt],
                        );
                        combine(&mut vs[col * vplane + at..][..nt], a, e, -1.0);
                        combine(&mut vs[(4 + col) * vplane + at..][..nt], b, e, 1.0);
                        combine(&mut vs[(8 + col) * vplane + at..][..nt], e, b, -1.0);
                        combine(&mut vs[(12 + col) * vplane + at..][..nt], b, f, -1.0);
                    }
                }
            }

            // The 16 products M[ξ] = U[ξ] · V[ξ], [out][nt] each.
            for xi in 0..16 {
                let vx = v.view_at_prefix(&[xi]).map_err(|e| anyhow!("{e}"))?;
                let pb = pack_b
                    .prepare_one_view(&vx, 0, 1)
                    .map_err(|e| anyhow!("{e}"))?;
                let mx = m.view_at_prefix_mut(&[xi]).map_err(|e| anyhow!("{e}"))?;
                unsafe {
                    let store = mmm.c_view(Some(0), Some(1)).wrap(&mx);
                    mmm.run_with_scratch_space(
                        k,
                        nt,
                        &mut *scratch,
                        &[
                            FusedSpec::AddMatMul {
                                a: AsInputValue::Borrowed(&*self.packed[xi]),
                                b: AsInputValue::Borrowed(&*pb),
                                packing: self.packing,
                            },
                            FusedSpec::Store(store),
                        ],
                    )
                    .map_err(|e| anyhow!("{e}"))?;
                }
            }

            // Output transform Aᵀ m A of the chunk's tiles, plus the bias.
            let plain = m.try_as_plain_ram().map_err(|e| anyhow!("{e}"))?;
            let ms = plain.as_slice::<f32>().map_err(|e| anyhow!("{e}"))?;
            let mplane = k * nt;
            for o in 0..k {
                let bias = self.bias.as_ref().map_or(0.0, |b| b[o]);
                // Across rows, (m0 + m1 + m2, m1 − m2 − m3), for the whole chunk at once.
                let at = o * nt;
                let g = |xi: usize| &ms[xi * mplane + at..][..nt];
                for col in 0..4 {
                    let (a, b, e, f) = (g(col), g(4 + col), g(8 + col), g(12 + col));
                    let [r0, r1] = &mut r;
                    for (((o, a), b), e) in r0[col][..nt].iter_mut().zip(a).zip(b).zip(e) {
                        *o = a + b + e;
                    }
                    for (((o, b), e), f) in r1[col][..nt].iter_mut().zip(b).zip(e).zip(f) {
                        *o = b - e - f;
                    }
                }
                // The same across columns, interleaved into the output rows.
                for (ri, row) in chunk.clone().enumerate() {
                    let (img, ti) = (row / th, row % th);
                    let out = &mut y[(img * k + o) * ho * wo..][..ho * wo];
                    for (dy, rr) in r.iter().enumerate() {
                        let yy = 2 * ti + dy;
                        if yy >= ho {
                            continue;
                        }
                        let run = |i: usize| &rr[i][ri * tw..][..tw];
                        let cols = pair
                            .chunks_exact_mut(2)
                            .zip(run(0))
                            .zip(run(1))
                            .zip(run(2))
                            .zip(run(3));
                        for ((((p, a), b), e), f) in cols {
                            p[0] = a + b + e + bias;
                            p[1] = b - e - f + bias;
                        }
                        out[yy * wo..][..wo].copy_from_slice(&pair[..wo]);
                    }
                }
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Direct 3×3 convolution, summed in f64: the oracle.
    /// Batch, input channels, output channels, height, width, padding.
    type Shape = (usize, usize, usize, usize, usize, [usize; 4]);

    fn direct(x: &[f32], k: &[f32], (n, c, o, h, w, pad): Shape) -> Vec<f64> {
        let [pt, pl, pb, pr] = pad;
        let (ho, wo) = (h + pt + pb - 2, w + pl + pr - 2);
        let mut y = vec![0f64; n * o * ho * wo];
        for img in 0..n {
            for oo in 0..o {
                for yy in 0..ho {
                    for xx in 0..wo {
                        let mut s = 0f64;
                        for cc in 0..c {
                            for dy in 0..3 {
                                for dx in 0..3 {
                                    let (iy, ix) = (
                                        (yy + dy) as isize - pt as isize,
                                        (xx + dx) as isize - pl as isize,
                                    );
                                    if iy < 0 || ix < 0 || iy >= h as isize || ix >= w as isize {
                                        continue;
                                    }
                                    s += x[((img * c + cc) * h + iy as usize) * w + ix as usize]
                                        as f64
                                        * k[((oo * c + cc) * 3 + dy) * 3 + dx] as f64;
                                }
                            }
                        }
                        y[((img * o + oo) * ho + yy) * wo + xx] = s;
                    }
                }
            }
        }
        y
    }

    fn noise(len: usize, seed: u64) -> Vec<f32> {
        let mut s = seed;
        (0..len)
            .map(|_| {
                s = s
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                ((s >> 40) as f32 / (1u64 << 24) as f32) - 0.5
            })
            .collect()
    }

    #[test]
    fn matches_the_direct_sum_on_odd_sizes_and_uneven_padding() {
        for &(n, c, o, h, w, pad) in &[
            (1, 3, 5, 7, 9, [1, 1, 1, 1]),
            (2, 4, 3, 6, 5, [0, 0, 0, 0]),
            (1, 17, 33, 11, 8, [1, 0, 2, 1]),
        ] {
            let x = noise(n * c * h * w, 1 + h as u64);
            let k = noise(o * c * 9, 7 + o as u64);
            let wg = Winograd::new(&k, o, c, None, pad, 16).unwrap();
            let got = wg.run(&x, n, h, w).unwrap();
            let want = direct(&x, &k, (n, c, o, h, w, pad));
            assert_eq!(got.len(), want.len());
            let worst = got
                .iter()
                .zip(&want)
                .map(|(a, b)| (*a as f64 - b).abs())
                .fold(0.0, f64::max);
            assert!(
                worst < 1e-5,
                "largest error {worst} for {:?}",
                (n, c, o, h, w, pad)
            );
        }
    }

    #[test]
    fn every_compiled_variant_gives_the_same_numbers() {
        // The transforms only add and subtract element by element, so vector width cannot
        // change a result: the AVX-512, AVX2 and baseline builds must agree to the bit.
        let (n, c, o, h, w) = (2, 5, 6, 15, 17);
        let x = noise(n * c * h * w, 11);
        let k = noise(o * c * 9, 12);
        let wg = Winograd::new(&k, o, c, None, [1, 1, 1, 1], 16).unwrap();
        let (ho, wo) = wg.output_hw(h, w).unwrap();
        let mut base = vec![0f32; n * o * ho * wo];
        wg.run_body(&x, n, h, w, &mut base).unwrap();
        let mut variants = 0;
        #[cfg(target_arch = "x86_64")]
        {
            if std::arch::is_x86_feature_detected!("avx2") {
                let mut y = vec![0f32; base.len()];
                unsafe { wg.run_avx2(&x, n, h, w, &mut y) }.unwrap();
                assert_eq!(y, base, "AVX2 build");
                variants += 1;
            }
            if std::arch::is_x86_feature_detected!("avx512f") {
                let mut y = vec![0f32; base.len()];
                unsafe { wg.run_avx512(&x, n, h, w, &mut y) }.unwrap();
                assert_eq!(y, base, "AVX-512 build");
                variants += 1;
            }
        }
        eprintln!("{variants} vector builds checked against the baseline one");
        assert_eq!(wg.run(&x, n, h, w).unwrap(), base, "the dispatched run");
    }

    #[test]
    fn the_adjoint_is_the_transpose() {
        // <conv(x), y> = <x, adjoint(y)> for random x and y.
        let (n, c, o, h, w, pad) = (1, 6, 4, 9, 7, [1, 1, 1, 1]);
        let x = noise(n * c * h * w, 3);
        let k = noise(o * c * 9, 4);
        let wg = Winograd::new(&k, o, c, None, pad, 16).unwrap();
        let (ho, wo) = wg.output_hw(h, w).unwrap();
        let y = noise(n * o * ho * wo, 5);
        let fx = wg.run(&x, n, h, w).unwrap();
        let aty = wg.adjoint(16).unwrap().run(&y, n, ho, wo).unwrap();
        assert_eq!(aty.len(), x.len());
        let lhs: f64 = fx.iter().zip(&y).map(|(a, b)| *a as f64 * *b as f64).sum();
        let rhs: f64 = x.iter().zip(&aty).map(|(a, b)| *a as f64 * *b as f64).sum();
        assert!(
            (lhs - rhs).abs() < 1e-4 * lhs.abs().max(1.0),
            "{lhs} vs {rhs}"
        );
    }
}
