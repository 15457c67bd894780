//! Region Shapley values, forwards only.
//!
//! The players are parts of the image (the cells of an N×N grid, or the found regions and the
//! rest of the image) and a coalition's value is the target's score on the input with the
//! absent players' pixels taken from the fill (a baseline): v(∅) = F(fill), v(all) = F(x). A
//! player's Shapley value is its marginal v(S ∪ {i}) − v(S) averaged over the orders in which
//! the players can arrive (Shapley 1953). It is estimated by sampling orders (Castro, Gómez,
//! Tejada 2009, "Polynomial calculation of the Shapley value based on sampling", Computers &
//! Operations Research): along any one order the marginals telescope to v(all) − v(∅), so the
//! values of every sampled order, and their mean, sum to F(x) − F(fill) (efficiency).
//!
//! Variance reduction: antithetic orders, each sampled order paired with its reverse (studied for
//! Shapley sampling by Mitchell, Cooper, Frank, Holmes 2022, "Sampling Permutations for Shapley
//! Value Estimation", JMLR; cited from memory). A pair's mean is one draw; the standard error is
//! the spread of the pair means over √pairs. When there are no more orders than the budget, all
//! are taken and the values are exact.
//!
//! Players live on the image's pixels; on the model's grid a player is its mask resampled as the
//! picture is (the feed's linear resampling), so the players' masks add up to one everywhere and
//! a position shared by two players is blended in proportion.

use std::collections::HashMap;
use std::sync::Mutex;

use anyhow::{Result, bail};
use ndarray::{Array2, Array3, ArrayD};
use serde::{Deserialize, Serialize};

use super::GridIndex;
use super::curves::shuffled;
use crate::control::Control;
use crate::methods::{Input, Scorer};
use crate::model::Model;
use crate::regions::{Region, mask_bbox};

/// Who the players are.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Players {
    /// The cells of an N×N grid over the image.
    Grid(usize),
    /// Each found region, and the rest of the image.
    Regions,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ShapleySettings {
    pub players: Players,
    /// Orders sampled (rounded up to whole antithetic pairs).
    pub permutations: usize,
    pub seed: u64,
}

impl Default for ShapleySettings {
    fn default() -> Self {
        ShapleySettings {
            players: Players::Grid(super::defaults::GRID),
            permutations: super::defaults::PERMUTATIONS,
            seed: super::defaults::SEED,
        }
    }
}

/// One player: a part of the image.
#[derive(Clone, Debug)]
pub struct Player {
    pub label: String,
    /// `[x0, y0, x1, y1]` in image pixels, far edges exclusive.
    pub bbox: [usize; 4],
    /// The player's share of each position of the model's grid (0..1).
    pub mask: Array2<f32>,
    /// A region player's pixels on the image (grid cells are their boxes).
    pub pixels: Option<Array2<bool>>,
}

/// One player's value.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Cell {
    #[serde(rename = "box")]
    pub bbox: [usize; 4],
    pub label: String,
    pub value: f64,
    /// Standard error of `value`: 0 when exact, `None` from a single pair of orders.
    pub stderr: Option<f64>,
    /// The reading's attribution summed over the player's part (set by [`cross_check`]).
    pub map_sum: Option<f64>,
    /// A region player's pixels on the image, for pictures of the values.
    #[serde(skip)]
    pub pixels: Option<Array2<bool>>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Shapley {
    /// N of the N×N grid; `None` when the players are the found regions and the rest.
    pub grid: Option<usize>,
    pub fill: String,
    pub cells: Vec<Cell>,
    /// Σ values; equals `score_input − score_baseline` (efficiency).
    pub sum: f64,
    pub score_input: f64,
    pub score_baseline: f64,
    /// Orders used.
    pub permutations: usize,
    pub exact: bool,
    /// How the values were found, in words.
    pub estimator: String,
    /// The largest |Σ marginals − (F(x) − F(fill))| over the orders used (0 up to rounding).
    pub efficiency_error: f64,
    /// Spearman's ρ between the players' values and the reading's attribution summed over each
    /// (set by [`cross_check`]): whether the map and the forwards-only values rank the parts
    /// alike.
    pub map_agreement: Option<f64>,
}

/// The image grid of an input: the picture's pixels, or a tensor's spatial axes.
fn image_dims(input: &Input) -> Result<(usize, usize)> {
    Ok(match input {
        Input::Picture { picture, .. } => (picture.height(), picture.width()),
        Input::Tensor { tensor, .. } => {
            let s = input.spatial_axes()?;
            (tensor.shape()[s[0]], tensor.shape()[s[1]])
        }
    })
}

/// An image-grid mask on the model's grid: resampled as the picture is fed, or as it is for a
/// tensor.
fn on_model_grid(input: &Input, mask: &Array2<bool>) -> Result<Array2<f32>> {
    let m = mask.mapv(|b| if b { 1.0f32 } else { 0.0 });
    match input {
        Input::Picture { feeder, picture } => {
            let c = picture.channels();
            let img = Array3::from_shape_fn((m.nrows(), m.ncols(), c), |(y, x, _)| m[[y, x]]);
            Ok(feeder.prepare(&img)?.index_axis(ndarray::Axis(2), 0).to_owned())
        }
        Input::Tensor { .. } => Ok(m),
    }
}

/// The cells of an `n`×`n` grid over the image, row by row; cell edges at round(k·side/n).
pub fn grid_players(input: &Input, n: usize) -> Result<Vec<Player>> {
    let (h, w) = image_dims(input)?;
    if n == 0 || n > h.min(w) {
        bail!(
            "a Shapley grid of {n}×{n} cells does not fit a {w}×{h} image; give --grid from 1 to {}, or leave the Shapley values out with --skip shapley",
            h.min(w)
        );
    }
    let edge = |k: usize, side: usize| ((k as f64 * side as f64 / n as f64).round() as usize).min(side);
    let mut out = Vec::with_capacity(n * n);
    for r in 0..n {
        for c in 0..n {
            let (y0, y1, x0, x1) = (edge(r, h), edge(r + 1, h), edge(c, w), edge(c + 1, w));
            let mask = Array2::from_shape_fn((h, w), |(y, x)| (y0..y1).contains(&y) && (x0..x1).contains(&x));
            out.push(Player { label: format!("cell {r},{c}"), bbox: [x0, y0, x1, y1], mask: on_model_grid(input, &mask)?, pixels: None });
        }
    }
    Ok(out)
}

/// Each region (a pixel in several goes to the first) and the rest of the image.
pub fn region_players(input: &Input, regions: &[Region]) -> Result<Vec<Player>> {
    let (h, w) = image_dims(input)?;
    let mut taken = Array2::from_elem((h, w), false);
    let mut out = vec![];
    for r in regions {
        if r.mask.dim() != (h, w) {
            bail!("region {} is not on the image's grid ({w}×{h})", r.label());
        }
        let own = Array2::from_shape_fn((h, w), |p| r.mask[p] && !taken[p]);
        let Some(bbox) = mask_bbox(&own) else { continue };
        taken.zip_mut_with(&own, |t, &o| *t |= o);
        out.push(Player { label: r.label(), bbox, mask: on_model_grid(input, &own)?, pixels: Some(own) });
    }
    let rest = taken.mapv(|t| !t);
    if let Some(bbox) = mask_bbox(&rest) {
        out.push(Player { label: "the rest of the image".into(), bbox, mask: on_model_grid(input, &rest)?, pixels: Some(rest) });
    }
    Ok(out)
}

/// The coalition game: v(S) is the target's score with the absent players' pixels from the fill.
pub struct Game<'a> {
    model: &'a Model,
    scorer: Scorer,
    x: &'a ArrayD<f32>,
    fill: &'a ArrayD<f32>,
    players: &'a [Player],
    /// Each player's nonzero (grid position, share) pairs.
    sparse: Vec<Vec<(u32, f32)>>,
    index: GridIndex,
    empty: f64,
    full: f64,
    /// Values already computed, by coalition bits.
    known: Mutex<HashMap<Vec<u64>, f64>>,
}

fn bits(members: &[bool]) -> Vec<u64> {
    let mut b = vec![0u64; members.len().div_ceil(64)];
    for (i, &m) in members.iter().enumerate() {
        if m {
            b[i / 64] |= 1 << (i % 64);
        }
    }
    b
}

impl<'a> Game<'a> {
    /// Runs the two ends: v(∅) = F(fill) and v(all) = F(x).
    pub fn new(
        model: &'a Model,
        scorer: Scorer,
        x: &'a ArrayD<f32>,
        fill: &'a ArrayD<f32>,
        spatial: [usize; 2],
        players: &'a [Player],
    ) -> Result<Game<'a>> {
        if players.is_empty() {
            bail!("a Shapley game needs at least one player");
        }
        let grid = (x.shape()[spatial[0]], x.shape()[spatial[1]]);
        if let Some(p) = players.iter().find(|p| p.mask.dim() != grid) {
            bail!("player {} is {:?} on the model grid, which is {grid:?}", p.label, p.mask.dim());
        }
        let ends = model.forward_many(&[fill.clone(), x.clone()], scorer.tap, &Control::new())?;
        let (empty, full) = (scorer.score(&ends[0]) as f64, scorer.score(&ends[1]) as f64);
        let sparse = players
            .iter()
            .map(|p| p.mask.iter().enumerate().filter(|(_, w)| **w != 0.0).map(|(i, w)| (i as u32, *w)).collect())
            .collect();
        let index = GridIndex::new(x.shape(), spatial);
        Ok(Game { model, scorer, x, fill, players, sparse, index, empty, full, known: Mutex::new(HashMap::new()) })
    }

    pub fn players(&self) -> usize {
        self.players.len()
    }

    /// v(∅) = F(fill).
    pub fn score_fill(&self) -> f64 {
        self.empty
    }

    /// v(all) = F(x).
    pub fn score_input(&self) -> f64 {
        self.full
    }

    /// The model input of a coalition (`members[i]`: player i present).
    pub fn input_of(&self, members: &[bool]) -> ArrayD<f32> {
        let (h, w) = self.index.grid();
        let mut m = vec![0.0f32; h * w];
        for (p, _) in self.sparse.iter().zip(members).filter(|(_, in_)| **in_) {
            for &(i, v) in p {
                m[i as usize] += v;
            }
        }
        self.index.blend(self.x, self.fill, &m)
    }

    /// v(S) of each coalition. The empty and the full coalition are the two ends exactly; others
    /// run once each (repeats come from memory). Progress: one unit per coalition.
    pub fn values(&self, coalitions: &[Vec<bool>], ctl: &Control) -> Result<Vec<f64>> {
        let n = self.players.len();
        if let Some(c) = coalitions.iter().find(|c| c.len() != n) {
            bail!("a coalition of {} flags for {n} players", c.len());
        }
        let mut todo: Vec<usize> = vec![];
        let mut seen: HashMap<Vec<u64>, usize> = HashMap::new();
        {
            let known = self.known.lock().unwrap();
            for (i, c) in coalitions.iter().enumerate() {
                let full = c.iter().all(|&m| m);
                let empty = !c.iter().any(|&m| m);
                let b = bits(c);
                if full || empty || known.contains_key(&b) || seen.contains_key(&b) {
                    ctl.advance(1);
                } else {
                    seen.insert(b, i);
                    todo.push(i);
                }
            }
        }
        for chunk in todo.chunks(64) {
            ctl.check()?;
            let xs: Vec<ArrayD<f32>> = chunk.iter().map(|&i| self.input_of(&coalitions[i])).collect();
            let outs = self.model.forward_many(&xs, self.scorer.tap, ctl)?;
            let mut known = self.known.lock().unwrap();
            for (&i, v) in chunk.iter().zip(&outs) {
                known.insert(bits(&coalitions[i]), self.scorer.score(v) as f64);
            }
        }
        let known = self.known.lock().unwrap();
        Ok(coalitions
            .iter()
            .map(|c| {
                if c.iter().all(|&m| m) {
                    self.full
                } else if !c.iter().any(|&m| m) {
                    self.empty
                } else {
                    known[&bits(c)]
                }
            })
            .collect())
    }

    /// Each order's marginals, indexed by player: v(S_k) − v(S_k−1) where S_k holds the first k
    /// players of the order. Each row sums to F(x) − F(fill) (the marginals telescope).
    pub fn marginals(&self, orders: &[Vec<usize>], ctl: &Control) -> Result<Vec<Vec<f64>>> {
        let n = self.players.len();
        for o in orders {
            let mut s = o.clone();
            s.sort_unstable();
            if s != (0..n).collect::<Vec<_>>() {
                bail!("an order must hold each of the {n} players once");
            }
        }
        let mut coalitions = Vec::with_capacity(orders.len() * (n + 1));
        for o in orders {
            let mut members = vec![false; n];
            coalitions.push(members.clone());
            for &p in o {
                members[p] = true;
                coalitions.push(members.clone());
            }
        }
        let v = self.values(&coalitions, ctl)?;
        Ok(orders
            .iter()
            .enumerate()
            .map(|(k, o)| {
                let vs = &v[k * (n + 1)..(k + 1) * (n + 1)];
                let mut m = vec![0.0; n];
                for (j, &p) in o.iter().enumerate() {
                    m[p] = vs[j + 1] - vs[j];
                }
                m
            })
            .collect())
    }
}

/// n! when it is at most `limit`.
fn factorial_up_to(n: usize, limit: usize) -> Option<usize> {
    (1..=n).try_fold(1usize, |f, k| f.checked_mul(k).filter(|&v| v <= limit))
}

/// Every order of 0..n, in lexicographic order.
fn all_orders(n: usize) -> Vec<Vec<usize>> {
    let mut p: Vec<usize> = (0..n).collect();
    let mut out = vec![p.clone()];
    loop {
        // Next lexicographic permutation (common practice).
        let Some(i) = (0..n.saturating_sub(1)).rev().find(|&i| p[i] < p[i + 1]) else { return out };
        let j = (i + 1..n).rev().find(|&j| p[j] > p[i]).expect("a larger element exists");
        p.swap(i, j);
        p[i + 1..].reverse();
        out.push(p.clone());
    }
}

/// The orders an estimate uses: all of them when there are at most `budget`, else `budget`
/// rounded up to whole antithetic pairs (an order, then its reverse). Returns (orders, exact).
pub fn orders_for(n: usize, budget: usize, seed: u64) -> (Vec<Vec<usize>>, bool) {
    if factorial_up_to(n, budget.max(1)).is_some() {
        return (all_orders(n), true);
    }
    let pairs = budget.div_ceil(2).max(1);
    let mut out = Vec::with_capacity(2 * pairs);
    for k in 0..pairs {
        let o = shuffled(n, seed, k);
        let mut r = o.clone();
        r.reverse();
        out.push(o);
        out.push(r);
    }
    (out, false)
}

/// Shapley values of the game's players from `budget` orders. Progress: one unit per coalition.
pub fn estimate(game: &Game, budget: usize, seed: u64, fill: &str, grid: Option<usize>, ctl: &Control) -> Result<Shapley> {
    let n = game.players();
    let (orders, exact) = orders_for(n, budget, seed);
    ctl.begin((orders.len() * (n + 1)) as u64);
    // Runs a few orders at a time so memory stays bounded whatever the budget.
    let per = (128 / n.max(1)).max(2) & !1;
    let mut marg: Vec<Vec<f64>> = Vec::with_capacity(orders.len());
    for chunk in orders.chunks(per) {
        marg.extend(game.marginals(chunk, ctl)?);
    }
    let diff = game.score_input() - game.score_fill();
    let efficiency_error = marg.iter().map(|m| (m.iter().sum::<f64>() - diff).abs()).fold(0.0, f64::max);
    // Exact: the plain mean over all orders. Sampled: one draw per antithetic pair.
    let draws: Vec<Vec<f64>> = if exact {
        marg.clone()
    } else {
        marg.chunks(2).map(|p| (0..n).map(|i| (p[0][i] + p[1][i]) / 2.0).collect()).collect()
    };
    let d = draws.len() as f64;
    let cells: Vec<Cell> = game
        .players
        .iter()
        .enumerate()
        .map(|(i, p)| {
            let mean = draws.iter().map(|m| m[i]).sum::<f64>() / d;
            let stderr = if exact {
                Some(0.0)
            } else if draws.len() >= 2 {
                let var = draws.iter().map(|m| (m[i] - mean).powi(2)).sum::<f64>() / (d - 1.0);
                Some((var / d).sqrt())
            } else {
                None
            };
            Cell { bbox: p.bbox, label: p.label.clone(), value: mean, stderr, map_sum: None, pixels: p.pixels.clone() }
        })
        .collect();
    let estimator = if exact {
        format!("exact: all {} orders of the {n} players", orders.len())
    } else {
        format!("{} sampled orders in {} antithetic pairs (each order with its reverse)", orders.len(), orders.len() / 2)
    };
    Ok(Shapley {
        grid,
        fill: fill.to_string(),
        sum: cells.iter().map(|c| c.value).sum(),
        cells,
        score_input: game.score_input(),
        score_baseline: game.score_fill(),
        permutations: orders.len(),
        exact,
        estimator,
        efficiency_error,
        map_agreement: None,
    })
}

/// Sets each cell's sum of `map` (a reading's map on the model grid) over its player's part and
/// the rank agreement of those sums with the values: a cross-check of a gradient method against
/// values that need only forwards.
pub fn cross_check(sh: &mut Shapley, players: &[Player], map: &Array2<f32>) {
    if players.len() != sh.cells.len() || players.iter().any(|p| p.mask.dim() != map.dim()) {
        return;
    }
    for (c, p) in sh.cells.iter_mut().zip(players) {
        c.map_sum = Some(p.mask.iter().zip(map.iter()).map(|(w, v)| *w as f64 * *v as f64).sum());
    }
    let row = |f: &dyn Fn(&Cell) -> f64| Array2::from_shape_vec((1, sh.cells.len()), sh.cells.iter().map(|c| f(c) as f32).collect()).expect("one row");
    let (values, sums) = (row(&|c| c.value), row(&|c| c.map_sum.unwrap_or(0.0)));
    sh.map_agreement = crate::methods::agree::spearman(&values, &sums);
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn all_orders_of_three() {
        let o = all_orders(3);
        assert_eq!(o, vec![vec![0, 1, 2], vec![0, 2, 1], vec![1, 0, 2], vec![1, 2, 0], vec![2, 0, 1], vec![2, 1, 0]]);
        assert_eq!(all_orders(1), vec![vec![0]]);
    }

    #[test]
    fn budgets_choose_exact_or_antithetic_pairs() {
        let (o, exact) = orders_for(4, 24, 0);
        assert!(exact && o.len() == 24);
        let (o, exact) = orders_for(4, 23, 0);
        assert!(!exact && o.len() == 24, "23 rounds up to 12 pairs");
        let (o, exact) = orders_for(10, 5, 1);
        assert!(!exact && o.len() == 6);
        for p in o.chunks(2) {
            let mut r = p[0].clone();
            r.reverse();
            assert_eq!(p[1], r, "each order is followed by its reverse");
        }
    }
}
