//! Quadrature rules on [0, 1] for the integrated-gradients path integral.

use serde::{Deserialize, Serialize};

/// How the path integral of integrated gradients is approximated.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Rule {
    /// Riemann sum at the midpoints of `steps` equal cells.
    Midpoint,
    /// Trapezoid rule on `steps` cells (`steps + 1` points, both ends included).
    Trapezoid,
    /// Gauss–Legendre nodes and weights: exact for polynomials of degree 2·steps − 1.
    GaussLegendre,
}

impl Rule {
    pub fn parse(s: &str) -> anyhow::Result<Rule> {
        Ok(match s {
            "midpoint" | "riemann" | "riemann-midpoint" => Rule::Midpoint,
            "trapezoid" => Rule::Trapezoid,
            "gauss-legendre" | "gauss" | "gl" => Rule::GaussLegendre,
            _ => anyhow::bail!("unknown quadrature rule \"{s}\"; use midpoint, trapezoid or gauss-legendre"),
        })
    }

    pub fn name(self) -> &'static str {
        match self {
            Rule::Midpoint => "midpoint",
            Rule::Trapezoid => "trapezoid",
            Rule::GaussLegendre => "gauss-legendre",
        }
    }

    /// (alpha, weight) pairs on [0, 1]; the weights sum to 1.
    pub fn nodes(self, steps: usize) -> Vec<(f64, f64)> {
        let m = steps.max(1);
        match self {
            Rule::Midpoint => (0..m).map(|k| ((k as f64 + 0.5) / m as f64, 1.0 / m as f64)).collect(),
            Rule::Trapezoid => (0..=m)
                .map(|k| {
                    let w = if k == 0 || k == m { 0.5 } else { 1.0 };
                    (k as f64 / m as f64, w / m as f64)
                })
                .collect(),
            Rule::GaussLegendre => gauss_legendre(m),
        }
    }
}

/// Gauss–Legendre nodes and weights mapped from [−1, 1] to [0, 1], by Newton's method on the
/// Legendre polynomial from the usual Chebyshev-like first guess (common practice).
pub fn gauss_legendre(n: usize) -> Vec<(f64, f64)> {
    let mut out = Vec::with_capacity(n);
    for i in 0..n {
        let mut x = (std::f64::consts::PI * (i as f64 + 0.75) / (n as f64 + 0.5)).cos();
        let mut dp = 1.0;
        for _ in 0..100 {
            // Three-term recurrence: p1 = P_n(x), p0 = P_{n-1}(x) (also right for n = 1).
            let (mut p0, mut p1) = (1.0f64, x);
            for k in 2..=n {
                let p2 = ((2 * k - 1) as f64 * x * p1 - (k - 1) as f64 * p0) / k as f64;
                p0 = p1;
                p1 = p2;
            }
            dp = n as f64 * (x * p1 - p0) / (x * x - 1.0);
            let dx = p1 / dp;
            x -= dx;
            if dx.abs() < 1e-15 {
                break;
            }
        }
        let w = 2.0 / ((1.0 - x * x) * dp * dp);
        out.push(((1.0 - x) / 2.0, w / 2.0));
    }
    out.sort_by(|a, b| a.0.partial_cmp(&b.0).unwrap());
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn two_point_rule_matches_the_closed_form() {
        // Two-point Gauss–Legendre on [−1,1]: nodes ±1/√3, weights 1 (textbook; common practice).
        let g = gauss_legendre(2);
        let d = 0.5 / 3f64.sqrt();
        assert!((g[0].0 - (0.5 - d)).abs() < 1e-14 && (g[1].0 - (0.5 + d)).abs() < 1e-14);
        assert!((g[0].1 - 0.5).abs() < 1e-14 && (g[1].1 - 0.5).abs() < 1e-14);
        let one = gauss_legendre(1);
        assert_eq!(one.len(), 1);
        assert!((one[0].0 - 0.5).abs() < 1e-14 && (one[0].1 - 1.0).abs() < 1e-14);
    }

    #[test]
    fn rules_integrate_what_they_promise() {
        // ∫₀¹ t^p dt = 1/(p+1). n-point Gauss–Legendre is exact to degree 2n−1.
        for n in [3usize, 8, 20, 64] {
            let g = gauss_legendre(n);
            for p in 0..(2 * n) {
                let s: f64 = g.iter().map(|(t, w)| w * t.powi(p as i32)).sum();
                assert!((s - 1.0 / (p as f64 + 1.0)).abs() < 1e-12, "n={n} p={p} got {s}");
            }
        }
        // Midpoint and trapezoid are exact for linear integrands.
        for r in [Rule::Midpoint, Rule::Trapezoid] {
            let s: f64 = r.nodes(7).iter().map(|(t, w)| w * (3.0 * t + 1.0)).sum();
            assert!((s - 2.5).abs() < 1e-12);
        }
    }
}
