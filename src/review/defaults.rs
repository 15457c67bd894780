//! The review's defaults, each with its reason. The command line's flags and
//! [`super::Settings::default`] read these; every one bounds work a reviewer can raise.

/// Steps of the deletion and insertion curves: the curve is sampled at 0, 1/32, …, 1 of the
/// model grid's pixels. RISE (Petsiuk, Das, Saenko 2018) removed pixels in small fixed steps;
/// 32 steps put a point every ~3 % of the image, fine enough for the area to settle to about a
/// percent (the trapezoid rule's error falls as 1/steps²) at 2 × 31 forwards per order.
pub const CURVE_STEPS: usize = 32;

/// Side of the patches the curves move, in model-grid pixels: 1, single pixels, as RISE
/// defines the curves (Petsiuk et al. 2018). `--curve-patch N` moves N×N regions instead, as
/// the region perturbation of Samek et al. (2017) does.
pub const CURVE_PATCH: usize = 1;

/// Random orders averaged for the reference curve. A few, seeded: the mean of 4 orders has
/// half the spread of one, and costs 4 × 62 forwards.
pub const RANDOM_ORDERS: usize = 4;

/// Seed of the random orders, the re-drawn weights and the permutations: fixed, so a review
/// repeats exactly.
pub const SEED: u64 = 0;

/// Top share for the top-k % overlap figures: the top 10 %, the middle one of the contour
/// levels the slide view offers (5, 10, 20 %).
pub const TOP_SHARE: f64 = 0.10;

/// A map whose magnitude still ranks with Spearman ρ ≥ this against the original after every
/// layer has been re-drawn is flagged as not depending on the model. Adebayo et al. (2018)
/// reported the figures and judged them without a cut-off; 0.5 is ours, set before looking at
/// any result: at ρ = 0.5 the ranking keeps much of its order although the model that made it is
/// gone.
pub const INDEPENDENT_SPEARMAN: f64 = 0.5;

/// Grid of the region Shapley values: 8 × 8 cells (32 pixels on a side on a 256-pixel image),
/// small enough that a site's corner tag falls within a cell or two, large enough that 64
/// players cost 63 forwards per permutation.
pub const GRID: usize = 8;

/// Permutations of the Shapley estimate (16 antithetic pairs). The standard error falls as
/// 1/√pairs; 16 pairs give each cell a usable error bar at 32 × 63 ≈ 2,000 forwards on the
/// default grid. When the players have no more orders than this (4 players: 24), every order
/// is taken and the values are exact.
pub const PERMUTATIONS: usize = 32;

/// The step counts of the convergence ladder run in powers of two from this…
pub const CONVERGENCE_MIN_STEPS: usize = 4;

/// …to this. The method's paper advises 20–300 steps (Sundararajan et al. 2017, section 3); up
/// to 64 the three rules take 253 gradients in all (the midpoint and trapezoid nodes share
/// points), about eight default readings. `--convergence-max 256` covers the paper's range.
pub const CONVERGENCE_MAX_STEPS: usize = 64;

/// The completeness gap whose step count the convergence reports: the gap the default reading
/// refines to (`methods::defaults::IG_GAP`).
pub const CONVERGENCE_GAP: f64 = crate::methods::defaults::IG_GAP as f64;

/// Readings whose completeness gap exceeds this get a warning: the method's paper advises
/// checking that the attributions add up to F(x) − F(x′) within 5 % (Sundararajan et al. 2017,
/// section 3).
pub const WARN_GAP: f64 = 0.05;
