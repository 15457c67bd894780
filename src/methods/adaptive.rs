//! Adaptive quadrature of integrated gradients' path integral, driven by completeness.
//!
//! The path [0, 1] is cut into cells, each with one gradient at its midpoint (the midpoint rule
//! on that cell). A cell [a, b] has its own completeness: its part of the attribution sum,
//! (b − a)·F′(m), against the score's change across it, F(b) − F(a), which costs two forwards
//! and no gradient (a forward is about a third of a gradient). The sum of the cells' signed
//! differences is the reading's completeness error, so the cells with the largest local gaps are
//! where the error is, and they are the ones refined: a refined cell is cut in three, its
//! midpoint gradient stays the midpoint of the middle third and the outer thirds get one new
//! gradient each (two gradients and two forwards per refinement, nothing computed is dropped).
//! Refinement stops when the reading's true completeness gap reaches the target, or at the cap.
//!
//! This is adaptive quadrature as numerical practice has long done it (error estimates per
//! interval, refine where the estimate is largest; common practice, e.g. the adaptive Simpson
//! and Gauss–Kronrod schemes); the error estimate here is the path's own exact difference of
//! scores, which integrated gradients' completeness property makes available.
//!
//! The map is Σ (b − a)·∇F(m) ⊙ (x − x′) over the cells: an estimate of the same path integral
//! as any fixed rule, with cells where the path needs them.

use anyhow::Result;

/// How far the refinement may go.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Settings {
    /// Equal cells to start with (one gradient each).
    pub start: usize,
    /// Most gradients in all.
    pub cap: usize,
    /// Most point gradients held at once; beyond it the cells with the smallest local gaps are
    /// folded into the map for good and not refined again (bounds memory on large inputs).
    pub keep: usize,
}

/// Where the map stands against its target.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Standing {
    /// Whether the total's error is within the target.
    pub within: bool,
    /// The error the target allows, in score units; `None`: nothing to refine (the scores at
    /// both ends are equal, or the gap is not a number).
    pub allowed: Option<f64>,
}

/// What the refinement did.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Report {
    /// Gradients computed (each a forward and a reverse pass).
    pub gradients: usize,
    /// Forwards computed at cell ends (no reverse pass).
    pub forwards: usize,
    /// Whether the target was reached (false: the cap stopped it first).
    pub reached: bool,
    /// Cells at the end, and refinement rounds.
    pub cells: usize,
    pub rounds: usize,
}

/// The path as the refinement sees it.
pub trait PathIntegral {
    /// What a gradient leaves for the map.
    type Point;
    /// The gradients at `alphas`: each one's slope dF/dα there and its point.
    fn gradients(&mut self, alphas: &[f64]) -> Result<Vec<(f64, Self::Point)>>;
    /// The scores F at `alphas` (forwards only).
    fn scores(&mut self, alphas: &[f64]) -> Result<Vec<f64>>;
    /// Adds weight · point to the map for good.
    fn fold(&mut self, weight: f64, point: Self::Point) -> Result<()>;
    /// How the map, its folded part plus the `held` (weight, point) pairs, stands.
    fn standing(&mut self, held: &[(f64, &Self::Point)]) -> Result<Standing>;
}

/// One cell [a, b] with the gradient at its midpoint.
struct Cell<T> {
    a: f64,
    b: f64,
    /// dF/dα at the midpoint.
    slope: f64,
    /// F(a), F(b) once known.
    fa: Option<f64>,
    fb: Option<f64>,
    /// The midpoint's gradient while it is held; `None` once folded into the map.
    point: Option<T>,
}

impl<T> Cell<T> {
    fn width(&self) -> f64 {
        self.b - self.a
    }
    /// |(b − a)·F′(m) − (F(b) − F(a))|: the cell's own completeness error, once its ends are known.
    fn local_gap(&self) -> Option<f64> {
        Some((self.width() * self.slope - (self.fb? - self.fa?)).abs())
    }
}

/// Refines until `path.reached` or the cap; `f0`, `f1` are F at α = 0 and 1. Every point ends
/// folded into the map (`path.fold`).
pub fn refine<P: PathIntegral>(path: &mut P, f0: f64, f1: f64, s: &Settings) -> Result<Report> {
    let n = s.start.max(1);
    let alphas: Vec<f64> = (0..n).map(|k| (k as f64 + 0.5) / n as f64).collect();
    let mut cells: Vec<Cell<P::Point>> = path
        .gradients(&alphas)?
        .into_iter()
        .enumerate()
        .map(|(k, (slope, p))| Cell {
            a: k as f64 / n as f64,
            b: (k + 1) as f64 / n as f64,
            slope,
            fa: (k == 0).then_some(f0),
            fb: (k + 1 == n).then_some(f1),
            point: Some(p),
        })
        .collect();
    let mut report = Report { gradients: n, forwards: 0, reached: false, cells: n, rounds: 0 };
    loop {
        let held: Vec<(f64, &P::Point)> = cells.iter().filter_map(|c| c.point.as_ref().map(|p| (c.width(), p))).collect();
        let standing = path.standing(&held)?;
        drop(held);
        if standing.within || standing.allowed.is_none() {
            report.reached = true;
            break;
        }
        let room = s.cap.saturating_sub(report.gradients) / 2;
        if room == 0 {
            break;
        }
        score_ends(path, &mut cells, &mut report)?;
        // The cells that carry the error: the largest local gaps, until they make half of all
        // the refinable cells' gaps (at least one, at most what the cap leaves room for).
        let mut order: Vec<(usize, f64)> =
            cells.iter().enumerate().filter(|(_, c)| c.point.is_some()).filter_map(|(i, c)| c.local_gap().map(|e| (i, e))).collect();
        order.sort_by(|x, y| y.1.total_cmp(&x.1).then(x.0.cmp(&y.0)));
        let total: f64 = order.iter().map(|(_, e)| e).sum();
        let mut chosen = vec![];
        let mut cum = 0.0;
        for &(i, e) in &order {
            if chosen.len() == room || (!chosen.is_empty() && cum >= 0.5 * total) {
                break;
            }
            chosen.push(i);
            cum += e;
        }
        if chosen.is_empty() {
            break;
        }
        chosen.sort_unstable();
        let new: Vec<f64> = chosen
            .iter()
            .flat_map(|&i| {
                let (a, h) = (cells[i].a, cells[i].width());
                [a + h / 6.0, a + 5.0 * h / 6.0]
            })
            .collect();
        let mut got = path.gradients(&new)?.into_iter();
        report.gradients += new.len();
        report.rounds += 1;
        let mut next = Vec::with_capacity(cells.len() + 2 * chosen.len());
        let mut pick = chosen.iter().peekable();
        for (i, c) in cells.into_iter().enumerate() {
            if pick.peek() != Some(&&i) {
                next.push(c);
                continue;
            }
            pick.next();
            let (a, b, h) = (c.a, c.b, c.width());
            let (l, r) = (got.next().expect("two gradients per cell"), got.next().expect("two gradients per cell"));
            next.push(Cell { a, b: a + h / 3.0, slope: l.0, fa: c.fa, fb: None, point: Some(l.1) });
            next.push(Cell { a: a + h / 3.0, b: a + 2.0 * h / 3.0, slope: c.slope, fa: None, fb: None, point: c.point });
            next.push(Cell { a: a + 2.0 * h / 3.0, b, slope: r.0, fa: None, fb: c.fb, point: Some(r.1) });
        }
        cells = next;
        // Memory: beyond `keep` held points, fold the cells least likely to be refined (the
        // smallest known local gaps; new cells have none yet and stay).
        let held = cells.iter().filter(|c| c.point.is_some()).count();
        if held > s.keep {
            let mut known: Vec<(usize, f64)> =
                cells.iter().enumerate().filter(|(_, c)| c.point.is_some()).filter_map(|(i, c)| c.local_gap().map(|e| (i, e))).collect();
            known.sort_by(|x, y| x.1.total_cmp(&y.1));
            for (i, _) in known.into_iter().take(held - s.keep) {
                let w = cells[i].width();
                let p = cells[i].point.take().expect("held");
                path.fold(w, p)?;
            }
        }
    }
    report.cells = cells.len();
    for c in cells {
        let w = c.width();
        if let Some(p) = c.point {
            path.fold(w, p)?;
        }
    }
    Ok(report)
}

/// Scores the cell ends not scored yet (a cell's b is the next one's a): forwards, at first use.
fn score_ends<P: PathIntegral>(path: &mut P, cells: &mut [Cell<P::Point>], report: &mut Report) -> Result<()> {
    let ends: Vec<f64> = cells.iter().filter(|c| c.fb.is_none()).map(|c| c.b).collect();
    if ends.is_empty() {
        return Ok(());
    }
    let f = path.scores(&ends)?;
    report.forwards += f.len();
    let mut it = f.into_iter();
    for i in 0..cells.len() {
        if cells[i].fb.is_none() {
            let v = it.next().expect("one score per end");
            cells[i].fb = Some(v);
            if i + 1 < cells.len() {
                cells[i + 1].fa = Some(v);
            }
        }
    }
    Ok(())
}

/// The uniform midpoint rule's node count that first reaches `target` on a scalar path, trying
/// `start`, 2·start, 4·start, … up to `max` (for comparisons with a fixed rule).
#[cfg(test)]
fn uniform_count(slope: &dyn Fn(f64) -> f64, f0: f64, f1: f64, target: f64, start: usize, max: usize) -> Option<usize> {
    let mut n = start;
    while n <= max {
        let sum: f64 = (0..n).map(|k| slope((k as f64 + 0.5) / n as f64)).sum::<f64>() / n as f64;
        if (sum - (f1 - f0)).abs() <= target * (f1 - f0).abs() {
            return Some(n);
        }
        n *= 2;
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A scalar path: F and F′ known in closed form; the map is the sum itself.
    struct Scalar<'a> {
        f: &'a dyn Fn(f64) -> f64,
        df: &'a dyn Fn(f64) -> f64,
        folded: f64,
        target: f64,
    }

    impl PathIntegral for Scalar<'_> {
        type Point = f64;
        fn gradients(&mut self, alphas: &[f64]) -> Result<Vec<(f64, f64)>> {
            Ok(alphas.iter().map(|a| ((self.df)(*a), (self.df)(*a))).collect())
        }
        fn scores(&mut self, alphas: &[f64]) -> Result<Vec<f64>> {
            Ok(alphas.iter().map(|a| (self.f)(*a)).collect())
        }
        fn fold(&mut self, w: f64, p: f64) -> Result<()> {
            self.folded += w * p;
            Ok(())
        }
        fn standing(&mut self, held: &[(f64, &f64)]) -> Result<Standing> {
            let sum = self.folded + held.iter().map(|(w, p)| w * *p).sum::<f64>();
            let diff = (self.f)(1.0) - (self.f)(0.0);
            let allowed = self.target * diff.abs();
            Ok(Standing { within: (sum - diff).abs() <= allowed, allowed: Some(allowed) })
        }
    }

    fn run(f: &dyn Fn(f64) -> f64, df: &dyn Fn(f64) -> f64, s: &Settings) -> (Report, f64) {
        let mut p = Scalar { f, df, folded: 0.0, target: 0.01 };
        let r = refine(&mut p, f(0.0), f(1.0), s).unwrap();
        (r, p.folded)
    }

    #[test]
    fn a_steep_step_needs_far_fewer_gradients_than_the_uniform_rule() {
        // A logistic step of width 1/400 at α = 0.73: the score turns in a narrow stretch of the path.
        let k = 400.0;
        let f = move |a: f64| 1.0 / (1.0 + (-k * (a - 0.73)).exp());
        let df = move |a: f64| {
            let s = f(a);
            k * s * (1.0 - s)
        };
        let s = Settings { start: 8, cap: 4096, keep: 1 << 20 };
        let (r, sum) = run(&f, &df, &s);
        let diff = f(1.0) - f(0.0);
        assert!(r.reached, "{r:?}");
        assert!((sum - diff).abs() <= 0.01 * diff.abs(), "sum {sum} against {diff}");
        let uniform = uniform_count(&df, f(0.0), f(1.0), 0.01, 8, 1 << 20).unwrap();
        // Equal cells must resolve the step everywhere; the refinement only where it is.
        assert!(r.gradients * 4 <= uniform, "adaptive {} gradients ({} forwards) against uniform {uniform}", r.gradients, r.forwards);
    }

    #[test]
    fn a_smooth_path_stops_at_the_start() {
        // Linear F′: the midpoint rule is exact, so the start already reaches the target.
        let f = |a: f64| a * a + a;
        let df = |a: f64| 2.0 * a + 1.0;
        let (r, sum) = run(&f, &df, &Settings { start: 8, cap: 100, keep: 100 });
        assert_eq!((r.gradients, r.forwards, r.rounds, r.reached), (8, 0, 0, true));
        assert!((sum - 2.0).abs() < 1e-12);
    }

    #[test]
    fn the_cap_stops_it_and_says_so() {
        let k = 2000.0;
        let f = move |a: f64| 1.0 / (1.0 + (-k * (a - 0.5123)).exp());
        let df = move |a: f64| {
            let s = f(a);
            k * s * (1.0 - s)
        };
        let (r, _) = run(&f, &df, &Settings { start: 4, cap: 10, keep: 100 });
        assert!(!r.reached);
        assert!(r.gradients <= 10, "{r:?}");
    }

    #[test]
    fn folding_for_memory_keeps_the_sum_exact() {
        // With a tiny `keep` cells are folded early; the final sum is still Σ width · F′(mid) over
        // the final cells, so it must reach the target as well.
        let k = 300.0;
        let f = move |a: f64| (k * (a - 0.3)).tanh();
        let df = move |a: f64| k * (1.0 - (k * (a - 0.3)).tanh().powi(2));
        let (r, sum) = run(&f, &df, &Settings { start: 8, cap: 4096, keep: 12 });
        let diff = f(1.0) - f(0.0);
        assert!(r.reached && (sum - diff).abs() <= 0.01 * diff.abs(), "{r:?} {sum} {diff}");
    }
}
