//! The central and noncentral F distributions, their quantiles, and the power of
//! F tests of fixed and random terms.
//!
//! Everything the planning stage needs from distribution theory lives here, and
//! nothing else does: this module does no I/O and knows nothing of layouts.
//!
//! # Conventions
//! - `df1`, `df2` are real degrees of freedom (a Satterthwaite `df2` such as 7.43
//!   is fine). They must be finite and positive.
//! - `nc` is the noncentrality λ in the sum-of-squares convention: for a fixed
//!   term, λ = Σ (effect)² × (replication) / σ², and λ = 0 is the central case. The
//!   Poisson mixing mean is λ/2. It must be finite, non-negative and at most
//!   [`MAX_NONCENTRALITY`].
//! - Probabilities are returned as `f64` in [0, 1].
//!
//! # Bad arguments
//! No function here panics or loops without bound. A NaN argument, a degree of
//! freedom that is not finite and positive, an `nc` that is negative, not
//! finite or above [`MAX_NONCENTRALITY`] (1e12), or a probability outside
//! [0, 1] gives NaN. An `x` at or below zero gives CDF 0 and
//! upper tail 1; `x = +∞` gives CDF 1 and upper tail 0.
//!
//! # Accuracy
//! Lower and upper tails are computed separately, each with small relative error,
//! so an upper tail of 1e-12 is not the difference of two numbers near one.
//! Values far below 1e-300 may underflow to zero. The series stopping rules target
//! a relative error of 1e-16; the prefactors carry the ~2e-14 absolute error of
//! `statrs`'s ln Γ below 10.
//!
//! Over the reference grid of `tests/reference/noncentral_f.py` (df1 1 … 50,
//! df2 1 … 1e6 including 2.5 and 7.43, λ 0 … 2000, tails down to 1e-14) the
//! largest difference from scipy 1.17.1 is 1.3e-11 for probabilities and 8e-11
//! relative for quantiles. Every such point rechecked with 30-digit mpmath
//! (`tests/reference/high_precision.py`) showed the difference to be scipy's:
//! this module is within 1e-13 relative of mpmath at all of them.
//!
//! # Why not `statrs::distribution::FisherSnedecor`
//! Measured against scipy, `statrs::function::beta::beta_reg` is off by up to
//! 6e-10 (2e-9 relative) at df2 = 1e6. It builds the prefactor x^a y^b / B(a, b)
//! from three ln Γ values of size ~(a + b) ln(a + b); its continued fraction,
//! used on the complement with x near 1, cancels in its first terms (4e-11 even
//! with an exact prefactor); and it stops after 140 terms without saying whether
//! it converged. Here the prefactor is computed in the Stirling form and the
//! fraction in terms of λ = a − (a + b)x (see `BetaShape` and `continued_fraction`).

use statrs::function::gamma::ln_gamma;
use std::f64::consts::TAU;

/// ½ ln 2π.
const LN_SQRT_2PI: f64 = 0.918_938_533_204_672_8;

/// Relative size of the neglected remainder at which a series is stopped.
const SERIES_EPS: f64 = 1e-16;

/// Most terms the Poisson mixture sums in each direction from its start. The
/// remainder bound is met within about 40 √(λ/2) + 200 terms, about 2e7 at
/// λ = MAX_NONCENTRALITY; past the cap the result is NaN.
const MAX_MIXTURE_TERMS: usize = 1 << 25;

/// Largest noncentrality accepted. The mixture's cost grows like √λ (about a
/// tenth of a second per evaluation here); power at such λ is 1 to every digit.
pub const MAX_NONCENTRALITY: f64 = 1e12;

/// Most iterations of the incomplete-beta continued fraction. Over the
/// validated range it needs at most a few hundred; past the cap (reached only
/// when both shape parameters are astronomically large) the result is NaN.
const MAX_FRACTION_TERMS: usize = 100_000;

/// Most iterations of the quantile root finder; past the cap the result is NaN.
const MAX_ROOT_ITERATIONS: usize = 200;

// ---------------------------------------------------------------------------
// Special functions
// ---------------------------------------------------------------------------

/// Stirling's remainder δ(z) = ln Γ(z) − (z − ½) ln z + z − ½ ln 2π, z > 0.
///
/// For z ≥ 10 the asymptotic series (Abramowitz & Stegun 1964, 6.1.41)
/// δ(z) = 1/(12z) − 1/(360z³) + 1/(1260z⁵) − 1/(1680z⁷) + 1/(1188z⁹)
///        − 691/(360360z¹¹) + 1/(156z¹³),
/// whose first neglected term is below 4e-17 at z = 10; below 10 by subtraction
/// from `statrs`'s ln Γ, whose absolute error (up to about 2e-14 there) becomes the
/// relative error of the beta and Poisson prefactors.
fn stirling_remainder(z: f64) -> f64 {
    if z >= 10.0 {
        let r = 1.0 / z;
        let r2 = r * r;
        r * (1.0 / 12.0
            - r2 * (1.0 / 360.0
                - r2 * (1.0 / 1260.0
                    - r2 * (1.0 / 1680.0
                        - r2 * (1.0 / 1188.0 - r2 * (691.0 / 360_360.0 - r2 / 156.0))))))
    } else {
        ln_gamma(z) - (z - 0.5) * z.ln() + z - LN_SQRT_2PI
    }
}

/// ln(1 + u) − u, given u and the ratio 1 + u, each computed accurately by the
/// caller (so that neither is formed by adding or subtracting one).
///
/// For |u| ≤ ½ the series ln(1 + u) = 2 artanh t, t = u/(2 + u), gives
/// ln(1 + u) − u = t (2t² Σ_{k≥0} t^{2k}/(2k + 3) − u), with t² ≤ 1/9;
/// otherwise ln(ratio) − u loses at most one digit.
fn ln1p_minus(u: f64, ratio: f64) -> f64 {
    if u.abs() <= 0.5 {
        let t = u / (2.0 + u);
        let t2 = t * t;
        let mut power = 1.0;
        let mut sum = 1.0 / 3.0;
        for k in 1..40 {
            power *= t2;
            let term = power / f64::from(2 * k + 3);
            sum += term;
            if term <= 1e-17 * sum {
                break;
            }
        }
        t * (2.0 * t2 * sum - u)
    } else {
        ratio.ln() - u
    }
}

/// Poisson probability p(k; μ) = e^{−μ} μ^k / k! for a whole number k ≥ 0.
///
/// Loader (2000), "Fast and accurate computation of binomial probabilities":
/// p(k; μ) = exp(−δ(k) − D(k, μ)) / √(2πk), with δ Stirling's remainder and
/// the deviance D(k, μ) = k ln(k/μ) + μ − k = −k (ln(1 + u) − u), u = (μ − k)/k,
/// which avoids the cancellation in −μ + k ln μ − ln k! for large k and μ.
fn poisson_probability(k: f64, mu: f64) -> f64 {
    if mu == 0.0 {
        return if k == 0.0 { 1.0 } else { 0.0 };
    }
    if k == 0.0 {
        return (-mu).exp();
    }
    let deviance = -k * ln1p_minus((mu - k) / k, mu / k);
    (-stirling_remainder(k) - deviance).exp() / (TAU * k).sqrt()
}

/// An approximate standard normal quantile, used only to start root finders.
///
/// Abramowitz & Stegun (1964) 26.2.23 (Hastings): for 0 < q ≤ ½ and
/// t = √(−2 ln q), the upper q-point is t − (c₀ + c₁t + c₂t²)/(1 + d₁t + d₂t² + d₃t³),
/// |error| < 4.5e-4.
fn normal_quantile_rough(p: f64) -> f64 {
    let upper_point = |q: f64| {
        let t = (-2.0 * q.ln()).sqrt();
        t - (2.515_517 + t * (0.802_853 + t * 0.010_328))
            / (1.0 + t * (1.432_788 + t * (0.189_269 + t * 0.001_308)))
    };
    if p < 0.5 {
        -upper_point(p)
    } else {
        upper_point(1.0 - p)
    }
}

// ---------------------------------------------------------------------------
// Regularized incomplete beta
// ---------------------------------------------------------------------------

/// The regularized incomplete beta I_x(a, b) and its complement at one point,
/// with the tail that the continued fraction computed directly kept as a log.
#[derive(Clone, Copy, Debug)]
struct BetaTail {
    /// True when I_x(a, b) itself was computed, false when 1 − I_x(a, b) was.
    lower_direct: bool,
    /// ln of the directly computed tail.
    ln_direct: f64,
    /// ln of x^a y^b / B(a, b), y = 1 − x: the derivative of I with respect to
    /// the log-odds ln(x/y).
    ln_term: f64,
}

impl BetaTail {
    fn direct(&self) -> f64 {
        self.ln_direct.exp().min(1.0)
    }
    fn lower(&self) -> f64 {
        if self.lower_direct {
            self.direct()
        } else {
            1.0 - self.direct()
        }
    }
    fn upper(&self) -> f64 {
        if self.lower_direct {
            1.0 - self.direct()
        } else {
            self.direct()
        }
    }
}

/// A beta shape (a, b) with the parts of x^a y^b / B(a, b) that do not depend on x.
#[derive(Clone, Copy, Debug)]
struct BetaShape {
    a: f64,
    b: f64,
    /// The mean a/(a + b) and its complement b/(a + b).
    x0: f64,
    y0: f64,
    /// ½ ln(ab / (2π(a + b))) + δ(a + b) − δ(a) − δ(b).
    ln_scale: f64,
}

impl BetaShape {
    fn new(a: f64, b: f64) -> Self {
        let x0 = a / (a + b);
        let y0 = b / (a + b);
        let ln_scale = 0.5 * (a.ln() + y0.ln() - TAU.ln()) + stirling_remainder(a + b)
            - stirling_remainder(a)
            - stirling_remainder(b);
        BetaShape {
            a,
            b,
            x0,
            y0,
            ln_scale,
        }
    }

    /// ln(x^a y^b / B(a, b)) for x + y = 1, both given so neither is 1 − the other.
    ///
    /// With Γ(z) = √(2π) z^{z−½} e^{−z} e^{δ(z)} and the mean x₀ = a/(a + b),
    /// x^a y^b / B(a, b) = √(ab / (2π(a + b))) (x/x₀)^a (y/y₀)^b e^{δ(a+b) − δ(a) − δ(b)},
    /// and a ln(x/x₀) + b ln(y/y₀) = a φ(x/x₀ − 1) + b φ(y/y₀ − 1) with
    /// φ(u) = ln(1 + u) − u, because a(x/x₀ − 1) + b(y/y₀ − 1) = 0. This is the
    /// form of DiDonato & Morris (1992), ACM TOMS 18, 360–373 (Algorithm 708,
    /// BRCOMP): no large logarithms cancel, so it keeps full relative accuracy
    /// for large a and b.
    fn ln_power_term(&self, x: f64, y: f64) -> f64 {
        // x − x₀ = y₀ − y; take it from the smaller of x and y, which is accurate.
        let (ua, ub) = if x <= y {
            let d = x - self.x0;
            (d / self.x0, -d / self.y0)
        } else {
            let d = y - self.y0;
            (-d / self.x0, d / self.y0)
        };
        self.ln_scale + self.a * ln1p_minus(ua, x / self.x0) + self.b * ln1p_minus(ub, y / self.y0)
    }

    /// I_x(a, b) and its complement for 0 < x < 1, y = 1 − x.
    ///
    /// Uses the continued fraction of [`continued_fraction`] for I_x(a, b) when
    /// x < (a + 1)/(a + b + 2), and for the complement I_y(b, a) otherwise, so
    /// the fraction converges quickly and the tail computed directly is the
    /// smaller or a comparable one. `None` if the fraction did not converge.
    fn tail(&self, x: f64, y: f64) -> Option<BetaTail> {
        let ln_term = self.ln_power_term(x, y);
        let (lower_direct, fraction, first) = if x < (self.a + 1.0) / (self.a + self.b + 2.0) {
            (true, continued_fraction(self.a, self.b, x, y)?, self.a)
        } else {
            (false, continued_fraction(self.b, self.a, y, x)?, self.b)
        };
        Some(BetaTail {
            lower_direct,
            ln_direct: ln_term + (fraction / first).ln(),
            ln_term,
        })
    }
}

/// The continued fraction f in I_x(a, b) = x^a y^b / (a B(a, b)) · f, y = 1 − x.
///
/// Abramowitz & Stegun (1964) 26.5.8 gives f = 1/(1 + d₁/(1 + d₂/(1 + …))) with
///   d_{2k+1} = −(a + k)(a + b + k) x / ((a + 2k)(a + 2k + 1)),
///   d_{2k}   = k (b − k) x / ((a + 2k − 1)(a + 2k)).
/// Its even contraction is f = 1/(B₁ − A₂/(B₂ − A₃/(B₃ − …))) with, for k ≥ 1,
///   A_{k+1} = d_{2k−1} d_{2k},   B_{k+1} = 1 + d_{2k} + d_{2k+1}.
/// Near x ≈ 1 the sums 1 + d_{2k+1} cancel badly, so they are rewritten with
/// λ = a − (a + b) x = (a + b) y − b, taken from the smaller of x and y:
///   B₁ = (λ + 1)/(a + 1),
///   1 + d_{2k+1} = (a + 2k + a k (2 + y) + k² (3 + y) + λ (a + k)) / ((a + 2k)(a + 2k + 1)),
/// which is the form of DiDonato & Morris (1992), ACM TOMS 18, 360–373
/// (Algorithm 708, BFRAC). Where the fraction is used (x < (a + 1)/(a + b + 2))
/// λ + 1 > 2x > 0. Evaluated by the modified Lentz method (Thompson & Barnett
/// 1986, J. Comput. Phys. 64, 490–509) until a step changes f by at most 4 ulp.
fn continued_fraction(a: f64, b: f64, x: f64, y: f64) -> Option<f64> {
    const TINY: f64 = 1e-300;
    let guard = |v: f64| if v.abs() < TINY { TINY } else { v };
    let lambda = if x <= y {
        a - (a + b) * x
    } else {
        (a + b) * y - b
    };
    let mut g = guard((lambda + 1.0) / (a + 1.0));
    let mut c = g;
    let mut d = 0.0;
    for k in 1..=MAX_FRACTION_TERMS {
        let k = k as f64;
        let odd_before =
            -(a + k - 1.0) * (a + b + k - 1.0) * x / ((a + 2.0 * k - 2.0) * (a + 2.0 * k - 1.0));
        let even = k * (b - k) * x / ((a + 2.0 * k - 1.0) * (a + 2.0 * k));
        let numerator = -odd_before * even;
        let denominator = even
            + (a + 2.0 * k + a * k * (2.0 + y) + k * k * (3.0 + y) + lambda * (a + k))
                / ((a + 2.0 * k) * (a + 2.0 * k + 1.0));
        d = 1.0 / guard(denominator + numerator * d);
        c = guard(denominator + numerator / c);
        let delta = c * d;
        g *= delta;
        if (delta - 1.0).abs() <= 4.0 * f64::EPSILON {
            return Some(1.0 / g);
        }
        if !g.is_finite() {
            return None;
        }
    }
    None
}

// ---------------------------------------------------------------------------
// Tails of the F distributions
// ---------------------------------------------------------------------------

/// Both tails of a distribution at a point, and x·f(x), the derivative of the
/// lower tail with respect to ln x (used by the quantile solver).
#[derive(Clone, Copy, Debug)]
struct Tails {
    lower: f64,
    upper: f64,
    slope: f64,
}

impl Tails {
    const NAN: Tails = Tails {
        lower: f64::NAN,
        upper: f64::NAN,
        slope: f64::NAN,
    };
}

fn valid_df(df: f64) -> bool {
    df.is_finite() && df > 0.0
}

fn valid_nc(nc: f64) -> bool {
    (0.0..=MAX_NONCENTRALITY).contains(&nc)
}

/// y = df1 x / (df1 x + df2) and 1 − y = df2 / (df1 x + df2), each computed
/// without subtraction, for 0 < x ≤ ∞.
fn beta_point(x: f64, df1: f64, df2: f64) -> (f64, f64) {
    let r = df1 / df2 * x;
    if r.is_infinite() {
        (1.0, 0.0)
    } else if r <= 1.0 {
        (r / (1.0 + r), 1.0 / (1.0 + r))
    } else {
        let s = 1.0 / r;
        (1.0 / (1.0 + s), s / (1.0 + s))
    }
}

/// The central F with df1, df2: F(x) = I_y(df1/2, df2/2), y = df1 x/(df1 x + df2)
/// (Abramowitz & Stegun 1964, 26.6.2).
#[derive(Clone, Copy, Debug)]
struct CentralF {
    df1: f64,
    df2: f64,
    shape: BetaShape,
}

impl CentralF {
    fn new(df1: f64, df2: f64) -> Self {
        CentralF {
            df1,
            df2,
            shape: BetaShape::new(0.5 * df1, 0.5 * df2),
        }
    }

    /// Tails at 0 < x < ∞.
    fn tails(&self, x: f64) -> Tails {
        let (y, w) = beta_point(x, self.df1, self.df2);
        if y <= 0.0 {
            return Tails {
                lower: 0.0,
                upper: 1.0,
                slope: 0.0,
            };
        }
        if w <= 0.0 {
            return Tails {
                lower: 1.0,
                upper: 0.0,
                slope: 0.0,
            };
        }
        match self.shape.tail(y, w) {
            Some(t) => Tails {
                lower: t.lower(),
                upper: t.upper(),
                slope: t.ln_term.exp(),
            },
            None => Tails::NAN,
        }
    }
}

/// The noncentral F with df1, df2 and noncentrality λ as a Poisson mixture.
///
/// Johnson, Kotz & Balakrishnan (1995), Continuous Univariate Distributions
/// vol. 2, ch. 30: with a = df1/2, b = df2/2, μ = λ/2, y = df1 x/(df1 x + df2),
///   F'(x) = Σ_j p(j; μ) I_y(a + j, b),   1 − F'(x) = Σ_j p(j; μ) (1 − I_y(a + j, b)).
///
/// The incomplete betas follow from one evaluation by the recurrence
/// (Abramowitz & Stegun 1964, §26.5)
///   I_y(a + j + 1, b) = I_y(a + j, b) − T_j,   T_j = y^{a+j} (1 − y)^b / ((a + j) B(a + j, b)),
///   T_{j+1} = T_j · y (a + b + j) / (a + j + 1),
/// so each term costs a few flops and the whole sum one `BetaShape::tail`.
///
/// Summation starts at the Poisson mode m = ⌊μ⌋ and runs outward both ways
/// (as in Benton & Krishnamoorthy 2003, Comput. Stat. Data Anal. 43, 249–267).
/// Only the tail that is the smaller one at the mode is summed; the other is its
/// complement, since the two series add to Σ_j p(j; μ) = 1. In the direction
/// where the summed tail S_j (I_j for the lower, 1 − I_j for the upper) shrinks,
/// the recurrence subtracts, but there the Poisson weights shrink too, so the
/// absolute rounding error stays a few ulps of p(m) S_m, below the sum's own size.
///
/// Stopping rule: after term j the remainder R is bounded with the Poisson
/// ratios p(k+1)/p(k) = μ/(k+1):
/// - upward (j > μ): Σ_{k>j} p(k) ≤ p(j) (μ/(j+1)) / (1 − μ/(j+2)) = p(j) μ (j+2) / ((j+1)(j+2−μ));
/// - downward (j < μ): Σ_{k<j} p(k) ≤ p(j) (j/μ) / (1 − (j−1)/μ) = p(j) j / (μ − j + 1);
///
/// and R ≤ S_j × that bound where S_k ≤ S_j beyond j (the summed tail shrinks
/// that way), else R ≤ 1 × that bound. The sum stops when R ≤ 1e-16 × (sum so
/// far), so the neglected part is below that relative error. When the caller
/// wants only the other tail (1 − sum), R ≤ 1e-16 × max(sum, 1 − sum) is enough,
/// which saves most of the terms when the summed tail is negligible, as the
/// lower tail at the critical value is when the power is near one.
///
/// The summed tail and the T_j are carried divided by a common scale (they enter
/// the recurrences linearly), so neither underflows when the tail is tiny.
#[derive(Clone, Copy, Debug)]
struct NoncentralF {
    df1: f64,
    df2: f64,
    a: f64,
    b: f64,
    mu: f64,
    /// The Poisson mode ⌊μ⌋ and its probability.
    mode: f64,
    mode_probability: f64,
    /// The beta shape (a + m, b) at the mode.
    shape: BetaShape,
}

/// The tail a caller needs to full relative accuracy; the other is then good
/// to about 1e-16 absolute.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Need {
    Lower,
    Upper,
}

impl NoncentralF {
    fn new(df1: f64, df2: f64, nc: f64) -> Self {
        let a = 0.5 * df1;
        let b = 0.5 * df2;
        let mu = 0.5 * nc;
        let mode = mu.floor();
        NoncentralF {
            df1,
            df2,
            a,
            b,
            mu,
            mode,
            mode_probability: poisson_probability(mode, mu),
            shape: BetaShape::new(a + mode, b),
        }
    }

    /// Tails at 0 < x ≤ ∞.
    fn tails(&self, x: f64, need: Need) -> Tails {
        let (y, w) = beta_point(x, self.df1, self.df2);
        self.tails_at(y, w, need)
    }

    /// Tails at the beta point y, w = 1 − y.
    fn tails_at(&self, y: f64, w: f64, need: Need) -> Tails {
        if y <= 0.0 {
            return Tails {
                lower: 0.0,
                upper: 1.0,
                slope: 0.0,
            };
        }
        if w <= 0.0 {
            return Tails {
                lower: 1.0,
                upper: 0.0,
                slope: 0.0,
            };
        }
        let Some(start) = self.shape.tail(y, w) else {
            return Tails::NAN;
        };
        let (a, b, mu, m) = (self.a, self.b, self.mu, self.mode);
        let lower_series = start.lower_direct;
        let complement_only = match need {
            Need::Lower => !lower_series,
            Need::Upper => lower_series,
        };

        // The series in scaled units, starting from S_m = 1.
        let mut series = ScaledSum::new(start.ln_direct);
        let s_m = 1.0;
        let t_m = (start.ln_term - (a + m).ln() - start.ln_direct).exp();
        let p_m = self.mode_probability;
        series.add(p_m, s_m, (a + m) * t_m);

        // Upward from the mode.
        let (mut s, mut t, mut p, mut j) = (s_m, t_m, p_m, m);
        let mut converged = false;
        for _ in 0..MAX_MIXTURE_TERMS {
            s = if lower_series {
                (s - t).max(0.0)
            } else {
                s + t
            };
            // T_{j+1} = T_j y (a+b+j)/(a+j+1) and p(j+1) = p(j) μ/(j+1), one division.
            let r = 1.0 / ((j + 1.0) * (a + j + 1.0));
            let growth = y * (a + b + j) * (j + 1.0) * r;
            series.keep_finite(&mut s, &mut t, growth);
            t *= growth;
            p *= mu * (a + j + 1.0) * r;
            j += 1.0;
            series.add(p, s, (a + j) * t);
            // R ≤ p μ (j+2) / ((j+1)(j+2−μ)) × (S_j or 1), compared without dividing.
            let bound = Remainder {
                weight: p * mu * (j + 2.0),
                denominator: (j + 1.0) * (j + 2.0 - mu),
                times_one: !lower_series,
            };
            if series.negligible(bound, s, complement_only) {
                converged = true;
                break;
            }
        }
        if !converged {
            return Tails::NAN;
        }

        // Downward from the mode; the start values in the current scale.
        let back = (start.ln_direct - series.ln_unit).exp();
        let (mut s, mut t, mut p, mut j) = (s_m * back, t_m * back, p_m, m);
        let mut steps = 0;
        while j > 0.0 {
            steps += 1;
            if steps > MAX_MIXTURE_TERMS {
                return Tails::NAN;
            }
            // T_{j−1} = T_j (a+j)/(y (a+b+j−1)) and p(j−1) = p(j) j/μ, one division.
            let r = 1.0 / (y * (a + b + j - 1.0) * mu);
            let growth = (a + j) * mu * r;
            series.keep_finite(&mut s, &mut t, growth);
            t *= growth;
            s = if lower_series {
                s + t
            } else {
                (s - t).max(0.0)
            };
            p *= j * y * (a + b + j - 1.0) * r;
            j -= 1.0;
            series.add(p, s, (a + j) * t);
            if j == 0.0 {
                break;
            }
            // R ≤ p j / (μ − j + 1) × (1 or S_j), compared without dividing.
            let bound = Remainder {
                weight: p * j,
                denominator: mu - j + 1.0,
                times_one: lower_series,
            };
            if series.negligible(bound, s, complement_only) {
                break;
            }
        }

        let small = series.value(series.sum).min(1.0);
        // The slope only steers the quantile solver, which copes with a
        // non-finite one.
        let slope = series.value(series.slope);
        if !small.is_finite() {
            return Tails::NAN;
        }
        if lower_series {
            Tails {
                lower: small,
                upper: 1.0 - small,
                slope,
            }
        } else {
            Tails {
                lower: 1.0 - small,
                upper: small,
                slope,
            }
        }
    }
}

/// A bound on the remainder of the mixture: weight / denominator × (1 or S_j),
/// where the weight is in real units and S_j in the running sum's units.
#[derive(Clone, Copy, Debug)]
struct Remainder {
    weight: f64,
    denominator: f64,
    times_one: bool,
}

/// A running sum in units of e^{ln_unit}, rescaled as its terms grow.
struct ScaledSum {
    /// Σ p_j S_j and Σ p_j (a + j) T_j, in units.
    sum: f64,
    slope: f64,
    ln_unit: f64,
    /// The unit e^{ln_unit} (possibly 0 when the summed tail is far below 1e-300).
    unit: f64,
}

impl ScaledSum {
    fn new(ln_unit: f64) -> Self {
        ScaledSum {
            sum: 0.0,
            slope: 0.0,
            ln_unit,
            unit: ln_unit.exp(),
        }
    }

    fn add(&mut self, p: f64, s: f64, term: f64) {
        self.sum += p * s;
        self.slope += p * term;
    }

    /// Whether the remainder is below 1e-16 of the sum, or, when only the
    /// complement 1 − sum is wanted, below 1e-16 of the larger of the two.
    fn negligible(&self, rest: Remainder, s: f64, complement_only: bool) -> bool {
        let Remainder {
            weight,
            denominator,
            times_one,
        } = rest;
        if complement_only {
            let total = self.sum * self.unit;
            let rest = if times_one {
                weight
            } else {
                weight * s * self.unit
            };
            rest <= SERIES_EPS * total.max(1.0 - total) * denominator
        } else if times_one {
            weight <= SERIES_EPS * self.sum * self.unit * denominator
        } else {
            weight * s <= SERIES_EPS * self.sum * denominator
        }
    }

    fn value(&self, scaled: f64) -> f64 {
        if scaled > 0.0 {
            (scaled.ln() + self.ln_unit).exp()
        } else {
            0.0
        }
    }

    /// Before T is multiplied by `growth` (which reaches 1/y going down when
    /// y is tiny), move to a unit in which s and T·growth are at most 1, if
    /// either exceeds 1e100, so the next term cannot overflow.
    fn keep_finite(&mut self, s: &mut f64, t: &mut f64, growth: f64) {
        let largest = s.max(*t * growth);
        if largest > 1e100 {
            let f = 1.0 / largest;
            *s *= f;
            *t *= f;
            self.sum *= f;
            self.slope *= f;
            self.ln_unit -= f.ln();
            self.unit = self.ln_unit.exp();
        }
    }
}

// ---------------------------------------------------------------------------
// Quantiles
// ---------------------------------------------------------------------------

/// The tail a quantile equation is written in.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Tail {
    Lower,
    Upper,
}

/// Solve tail(x) = target for x > 0, 0 < target ≤ ½ (so the tail in question
/// is the smaller one and its log is well resolved).
///
/// Newton's method in s = ln x on h(s) = ± (ln tail(e^s) − ln target), whose
/// derivative is x f(x) / tail. For the central F, ln F has a log-concave
/// density (a s − (a + b) ln(1 + (df1/df2) e^s) up to a constant is concave),
/// so both tails are log-concave in s (Bagnoli & Bergstrom 2005, Economic
/// Theory 26, 445–469) and Newton converges from any start after at most one
/// overshoot. Each step is safeguarded by a bracket: a step leaving it is
/// replaced by bisection, or by doubling steps while one side is still open.
fn solve_quantile(target: f64, tail: Tail, x_start: f64, tails: impl Fn(f64) -> Tails) -> f64 {
    const S_MIN: f64 = -745.0;
    const S_MAX: f64 = 709.0;
    let ln_target = target.ln();
    let (mut lo, mut hi) = (f64::NEG_INFINITY, f64::INFINITY);
    let mut s = if x_start.is_finite() && x_start > 0.0 {
        x_start.ln().clamp(S_MIN, S_MAX)
    } else {
        0.0
    };
    let mut reach = 1.0;
    for _ in 0..MAX_ROOT_ITERATIONS {
        let at = tails(s.exp());
        let (value, slope) = match tail {
            Tail::Lower => (at.lower, at.slope),
            Tail::Upper => (at.upper, at.slope),
        };
        if value.is_nan() || slope.is_nan() {
            return f64::NAN;
        }
        if value == target {
            return s.exp();
        }
        // h > 0 means s is above the root; h = 0 means the root is found to
        // the resolution of ln.
        let h = match tail {
            Tail::Lower => value.ln() - ln_target,
            Tail::Upper => ln_target - value.ln(),
        };
        if h == 0.0 {
            return s.exp();
        }
        if h > 0.0 {
            hi = s;
        } else {
            lo = s;
        }
        let tolerance = 1e-14 * s.abs().max(1.0);
        let newton = if slope.is_finite() && slope > 0.0 {
            s - h * value / slope
        } else {
            f64::NAN
        };
        if newton.is_finite() && (newton - s).abs() <= tolerance {
            return newton.exp();
        }
        let next = if newton.is_finite() && newton > lo && newton < hi {
            newton
        } else if lo.is_finite() && hi.is_finite() {
            0.5 * (lo + hi)
        } else {
            reach *= 2.0;
            if hi.is_finite() {
                (s - reach).max(S_MIN)
            } else {
                (s + reach).min(S_MAX)
            }
        };
        if next == s {
            // At a limit of the representable range with the root beyond it.
            return if s <= S_MIN { 0.0 } else { f64::INFINITY };
        }
        if hi - lo <= tolerance {
            return next.exp();
        }
        s = next;
    }
    f64::NAN
}

/// Start for a central F quantile: Paulson's (1942, Ann. Math. Stat. 13, 233–235)
/// normal approximation z = ((1 − c₂) t − (1 − c₁)) / √(c₂ t² + c₁), t = F^{1/3},
/// c_i = 2/(9 df_i), solved for t. Falls back to x = 1.
fn paulson_start(z: f64, df1: f64, df2: f64) -> f64 {
    let c1 = 2.0 / (9.0 * df1);
    let c2 = 2.0 / (9.0 * df2);
    let qa = (1.0 - c2) * (1.0 - c2) - z * z * c2;
    let qb = (1.0 - c1) * (1.0 - c2);
    let qc = (1.0 - c1) * (1.0 - c1) - z * z * c1;
    let disc = qb * qb - qa * qc;
    if qa <= 0.0 || disc < 0.0 {
        return 1.0;
    }
    let t = if z >= 0.0 {
        (qb + disc.sqrt()) / qa
    } else {
        (qb - disc.sqrt()) / qa
    };
    if t > 0.0 && t.is_finite() {
        t * t * t
    } else {
        1.0
    }
}

/// The normal deviate of a lower-tail probability, or of an upper one.
fn start_deviate(target: f64, tail: Tail) -> f64 {
    match tail {
        Tail::Lower => normal_quantile_rough(target),
        Tail::Upper => -normal_quantile_rough(target),
    }
}

fn central_quantile(target: f64, tail: Tail, df1: f64, df2: f64) -> f64 {
    let dist = CentralF::new(df1, df2);
    let start = paulson_start(start_deviate(target, tail), df1, df2);
    solve_quantile(target, tail, start, |x| dist.tails(x))
}

/// Writes a quantile equation for probability p of `tail` in the smaller tail.
fn smaller_tail(p: f64, tail: Tail) -> (f64, Tail) {
    let other = match tail {
        Tail::Lower => Tail::Upper,
        Tail::Upper => Tail::Lower,
    };
    if p <= 0.5 {
        (p, tail)
    } else {
        (1.0 - p, other)
    }
}

// ---------------------------------------------------------------------------
// Public API
// ---------------------------------------------------------------------------

/// CDF of the central F distribution with `df1` and `df2` degrees of freedom.
///
/// F(x) = I_y(df1/2, df2/2), y = df1 x / (df1 x + df2) (Abramowitz & Stegun
/// 1964, 26.6.2). NaN for a NaN `x` or a degree of freedom that is not finite
/// and positive.
pub fn f_cdf(x: f64, df1: f64, df2: f64) -> f64 {
    if x.is_nan() || !valid_df(df1) || !valid_df(df2) {
        return f64::NAN;
    }
    if x <= 0.0 {
        return 0.0;
    }
    if x == f64::INFINITY {
        return 1.0;
    }
    CentralF::new(df1, df2).tails(x).lower
}

/// Upper tail 1 − CDF of the central F distribution, accurate in the far tail.
///
/// 1 − F(x) = I_{1−y}(df2/2, df1/2), 1 − y = df2 / (df1 x + df2), computed
/// directly rather than by subtraction. NaN as for [`f_cdf`].
pub fn f_sf(x: f64, df1: f64, df2: f64) -> f64 {
    if x.is_nan() || !valid_df(df1) || !valid_df(df2) {
        return f64::NAN;
    }
    if x <= 0.0 {
        return 1.0;
    }
    if x == f64::INFINITY {
        return 0.0;
    }
    CentralF::new(df1, df2).tails(x).upper
}

/// Quantile (inverse CDF) of the central F distribution: the x with
/// `f_cdf(x, df1, df2) = p`.
///
/// Solved by safeguarded Newton iteration (see `solve_quantile`) in the
/// smaller of the two tails, to about 1e-14 relative (1e-14 × |ln x| when
/// x is beyond e^{±1}). `p = 0` gives 0, `p = 1`
/// gives +∞; NaN for p outside [0, 1] or invalid degrees of freedom.
pub fn f_quantile(p: f64, df1: f64, df2: f64) -> f64 {
    quantile_with(p, Tail::Lower, df1, df2, None)
}

/// Upper quantile of the central F distribution: the x with
/// `f_sf(x, df1, df2) = q`, the critical value of a level-q test.
///
/// Same method and arguments as [`f_quantile`]; taking the upper-tail
/// probability directly avoids the rounding of 1 − q when q is small.
pub fn f_upper_quantile(q: f64, df1: f64, df2: f64) -> f64 {
    quantile_with(q, Tail::Upper, df1, df2, None)
}

/// CDF of the noncentral F distribution with noncentrality `nc` (λ, the
/// sum-of-squares convention: nc = 0 is central).
///
/// The Poisson mixture of `NoncentralF`. NaN for a NaN `x`, invalid degrees of
/// freedom, or `nc` negative or not finite.
pub fn noncentral_f_cdf(x: f64, df1: f64, df2: f64, nc: f64) -> f64 {
    noncentral_tails(x, df1, df2, nc, Need::Lower).lower
}

/// Upper tail 1 − CDF of the noncentral F distribution, accurate in the far tail.
/// Arguments as for [`noncentral_f_cdf`].
pub fn noncentral_f_sf(x: f64, df1: f64, df2: f64, nc: f64) -> f64 {
    noncentral_tails(x, df1, df2, nc, Need::Upper).upper
}

/// Quantile of the noncentral F distribution: the x with
/// `noncentral_f_cdf(x, df1, df2, nc) = p`.
///
/// Safeguarded Newton iteration as for [`f_quantile`], started from Patnaik's
/// (1949, Biometrika 36, 202–232) approximation F' ≈ ((df1 + λ)/df1) F(ν, df2),
/// ν = (df1 + λ)² / (df1 + 2λ). `p = 0` gives 0, `p = 1` gives +∞; NaN for p
/// outside [0, 1] or invalid arguments.
pub fn noncentral_f_quantile(p: f64, df1: f64, df2: f64, nc: f64) -> f64 {
    if !valid_nc(nc) {
        return f64::NAN;
    }
    quantile_with(p, Tail::Lower, df1, df2, Some(nc))
}

fn noncentral_tails(x: f64, df1: f64, df2: f64, nc: f64, need: Need) -> Tails {
    if x.is_nan() || !valid_df(df1) || !valid_df(df2) || !valid_nc(nc) {
        return Tails::NAN;
    }
    if x <= 0.0 {
        return Tails {
            lower: 0.0,
            upper: 1.0,
            slope: 0.0,
        };
    }
    NoncentralF::new(df1, df2, nc).tails(x, need)
}

fn quantile_with(p: f64, tail: Tail, df1: f64, df2: f64, nc: Option<f64>) -> f64 {
    if p.is_nan() || !(0.0..=1.0).contains(&p) || !valid_df(df1) || !valid_df(df2) {
        return f64::NAN;
    }
    let (target, tail) = smaller_tail(p, tail);
    if target == 0.0 {
        return if tail == Tail::Lower {
            0.0
        } else {
            f64::INFINITY
        };
    }
    match nc {
        Some(nc) if nc > 0.0 => {
            let dist = NoncentralF::new(df1, df2, nc);
            let scale = (df1 + nc) / df1;
            let nu = (df1 + nc) * (df1 + nc) / (df1 + 2.0 * nc);
            let start = scale * paulson_start(start_deviate(target, tail), nu, df2);
            let need = match tail {
                Tail::Lower => Need::Lower,
                Tail::Upper => Need::Upper,
            };
            solve_quantile(target, tail, start, |x| dist.tails(x, need))
        }
        _ => central_quantile(target, tail, df1, df2),
    }
}

/// Power of the F test of a fixed term at level `alpha`:
/// P(F' > F_crit) with F_crit the upper-`alpha` point of F(df1, df2) and F'
/// noncentral with noncentrality `nc` (Tang 1938, Statist. Res. Mem. 2, 126–149).
///
/// NaN for `alpha` outside [0, 1] or invalid `df1`, `df2`, `nc`. For many
/// noncentralities at one level and df, use [`CriticalValue`].
pub fn fixed_power(alpha: f64, df1: f64, df2: f64, nc: f64) -> f64 {
    CriticalValue::new(alpha, df1, df2).fixed_power(nc)
}

/// Power of the F test of a random term: P(F > F_crit × ratio), where
/// ratio = E(MS_den)/E(MS_term) (≤ 1 under the alternative).
///
/// Under the random-effects model MS_term/MS_den is distributed as
/// F(df1, df2) / ratio (Scheffé 1959, The Analysis of Variance, ch. 7), so the
/// power is the central upper tail at F_crit × ratio. NaN for `alpha` outside
/// [0, 1], invalid df, or `ratio` negative or NaN.
pub fn random_power(alpha: f64, df1: f64, df2: f64, ratio: f64) -> f64 {
    random_power_beyond(f_upper_quantile(alpha, df1, df2), df1, df2, ratio)
}

/// P(F(df1, df2) > critical × ratio), for a critical value from `f_upper_quantile`.
fn random_power_beyond(critical: f64, df1: f64, df2: f64, ratio: f64) -> f64 {
    if critical.is_nan() || ratio.is_nan() || ratio < 0.0 {
        return f64::NAN;
    }
    if critical == f64::INFINITY {
        // alpha = 0: the test never rejects.
        return 0.0;
    }
    if critical == 0.0 {
        // alpha = 1: the test always rejects.
        return 1.0;
    }
    f_sf(critical * ratio, df1, df2)
}

/// The upper-`alpha` point of F(df1, df2), computed once, so that a caller
/// evaluating many noncentralities for the same (alpha, df1, df2) pays for the
/// quantile only once.
///
/// It also keeps the start of the power series at the critical value: with
/// a = df1/2, b = df2/2, y = df1 F_crit/(df1 F_crit + df2), the upper tails
/// Q_j = 1 − I_y(a + j, b) satisfy Q₀ = alpha and Q_{j+1} = Q_j + T_j, so
///   power = Σ_{j≥0} p(j; λ/2) Q_j
/// can be summed upward from j = 0 by additions only (no cancellation, and no
/// new incomplete beta per noncentrality), stopping past the Poisson mode by the
/// upward remainder bound of `NoncentralF`. That costs about λ/2 + 8√(λ/2)
/// terms, so for λ/2 above [`CriticalValue::SERIES_FROM_ZERO_UP_TO`] the
/// general mode-centred sum is used instead.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CriticalValue {
    alpha: f64,
    df1: f64,
    df2: f64,
    value: f64,
    /// Q₀ = 1 − I_y(a, b) and T₀ = y^a (1 − y)^b / (a B(a, b)) at the critical
    /// value, when both are normal numbers.
    start: Option<SeriesStart>,
}

#[derive(Clone, Copy, Debug, PartialEq)]
struct SeriesStart {
    a: f64,
    b: f64,
    y: f64,
    upper: f64,
    term: f64,
}

impl CriticalValue {
    /// Largest Poisson mean λ/2 for which [`CriticalValue::fixed_power`] sums
    /// upward from j = 0; beyond it the mode-centred sum is cheaper.
    pub const SERIES_FROM_ZERO_UP_TO: f64 = 100.0;

    /// The critical value F_crit with P(F(df1, df2) > F_crit) = alpha. With
    /// invalid arguments the value is NaN, and so is every power from it.
    pub fn new(alpha: f64, df1: f64, df2: f64) -> Self {
        let value = f_upper_quantile(alpha, df1, df2);
        let start = if value.is_finite() && value > 0.0 {
            let (a, b) = (0.5 * df1, 0.5 * df2);
            let (y, w) = beta_point(value, df1, df2);
            BetaShape::new(a, b)
                .tail(y, w)
                .map(|tail| SeriesStart {
                    a,
                    b,
                    y,
                    upper: tail.upper(),
                    term: tail.ln_term.exp() / a,
                })
                .filter(|s| s.upper.is_normal() && s.term.is_normal() && s.upper < 1.0)
        } else {
            None
        };
        CriticalValue {
            alpha,
            df1,
            df2,
            value,
            start,
        }
    }

    /// The critical value F_crit.
    pub fn value(&self) -> f64 {
        self.value
    }

    /// The level of the test.
    pub fn alpha(&self) -> f64 {
        self.alpha
    }

    /// Power of the test of a fixed term with noncentrality `nc`: see [`fixed_power`].
    pub fn fixed_power(&self, nc: f64) -> f64 {
        if self.value.is_nan() || !valid_nc(nc) {
            return f64::NAN;
        }
        match self.start {
            Some(start) if 0.5 * nc <= Self::SERIES_FROM_ZERO_UP_TO => {
                start.upper_mixture(0.5 * nc)
            }
            _ => noncentral_f_sf(self.value, self.df1, self.df2, nc),
        }
    }

    /// Power of the test of a random term with ratio E(MS_den)/E(MS_term): see
    /// [`random_power`].
    pub fn random_power(&self, ratio: f64) -> f64 {
        random_power_beyond(self.value, self.df1, self.df2, ratio)
    }
}

impl SeriesStart {
    /// Σ_j p(j; μ) Q_j summed upward from j = 0, for 0 ≤ μ ≤ 100 (so that
    /// p(0; μ) = e^{−μ} is a normal number).
    fn upper_mixture(&self, mu: f64) -> f64 {
        let (a, b, y) = (self.a, self.b, self.y);
        let (mut q, mut t, mut p, mut j) = (self.upper, self.term, (-mu).exp(), 0.0);
        let mut sum = p * q;
        for _ in 0..MAX_MIXTURE_TERMS {
            q = (q + t).min(1.0);
            let r = 1.0 / ((j + 1.0) * (a + j + 1.0));
            t *= y * (a + b + j) * (j + 1.0) * r;
            p *= mu * (a + j + 1.0) * r;
            j += 1.0;
            sum += p * q;
            // Past the mode, R ≤ p μ (j+2) / ((j+1)(j+2−μ)) × 1.
            if j + 2.0 > mu && p * mu * (j + 2.0) <= SERIES_EPS * sum * ((j + 1.0) * (j + 2.0 - mu))
            {
                return sum.min(1.0);
            }
        }
        f64::NAN
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every public function on arguments it must refuse: NaN, never a panic.
    #[test]
    fn bad_arguments_give_nan() {
        let bad_df = [f64::NAN, 0.0, -1.0, f64::INFINITY, f64::NEG_INFINITY];
        for df in bad_df {
            assert!(f_cdf(1.0, df, 5.0).is_nan(), "df1 {df}");
            assert!(f_cdf(1.0, 5.0, df).is_nan(), "df2 {df}");
            assert!(f_sf(1.0, df, 5.0).is_nan());
            assert!(f_sf(1.0, 5.0, df).is_nan());
            assert!(f_quantile(0.5, df, 5.0).is_nan());
            assert!(f_upper_quantile(0.05, 5.0, df).is_nan());
            assert!(noncentral_f_cdf(1.0, df, 5.0, 2.0).is_nan());
            assert!(noncentral_f_sf(1.0, 5.0, df, 2.0).is_nan());
            assert!(noncentral_f_quantile(0.5, df, 5.0, 2.0).is_nan());
            assert!(fixed_power(0.05, df, 5.0, 2.0).is_nan());
            assert!(fixed_power(0.05, 5.0, df, 2.0).is_nan());
            assert!(random_power(0.05, df, 5.0, 0.5).is_nan());
            assert!(CriticalValue::new(0.05, 5.0, df).value().is_nan());
            assert!(CriticalValue::new(0.05, df, 5.0).fixed_power(2.0).is_nan());
        }
        for nc in [
            f64::NAN,
            -1e-300,
            -1.0,
            1.1e12,
            f64::INFINITY,
            f64::NEG_INFINITY,
        ] {
            assert!(noncentral_f_cdf(1.0, 3.0, 5.0, nc).is_nan(), "nc {nc}");
            assert!(noncentral_f_sf(1.0, 3.0, 5.0, nc).is_nan());
            assert!(noncentral_f_quantile(0.5, 3.0, 5.0, nc).is_nan());
            assert!(fixed_power(0.05, 3.0, 5.0, nc).is_nan());
            assert!(CriticalValue::new(0.05, 3.0, 5.0).fixed_power(nc).is_nan());
        }
        for p in [f64::NAN, -0.1, 1.1, f64::INFINITY, f64::NEG_INFINITY] {
            assert!(f_quantile(p, 3.0, 5.0).is_nan(), "p {p}");
            assert!(f_upper_quantile(p, 3.0, 5.0).is_nan());
            assert!(noncentral_f_quantile(p, 3.0, 5.0, 2.0).is_nan());
            assert!(fixed_power(p, 3.0, 5.0, 2.0).is_nan());
            assert!(random_power(p, 3.0, 5.0, 0.5).is_nan());
        }
        for ratio in [f64::NAN, -0.5, f64::NEG_INFINITY] {
            assert!(
                random_power(0.05, 3.0, 5.0, ratio).is_nan(),
                "ratio {ratio}"
            );
        }
        assert!(f_cdf(f64::NAN, 3.0, 5.0).is_nan());
        assert!(noncentral_f_sf(f64::NAN, 3.0, 5.0, 1.0).is_nan());
    }

    /// The edges of the domain, where the answer is known exactly.
    #[test]
    fn domain_edges() {
        for x in [0.0, -1.0, f64::NEG_INFINITY] {
            assert_eq!(f_cdf(x, 3.0, 5.0), 0.0);
            assert_eq!(f_sf(x, 3.0, 5.0), 1.0);
            assert_eq!(noncentral_f_cdf(x, 3.0, 5.0, 4.0), 0.0);
            assert_eq!(noncentral_f_sf(x, 3.0, 5.0, 4.0), 1.0);
        }
        assert_eq!(f_cdf(f64::INFINITY, 3.0, 5.0), 1.0);
        assert_eq!(f_sf(f64::INFINITY, 3.0, 5.0), 0.0);
        assert_eq!(noncentral_f_cdf(f64::INFINITY, 3.0, 5.0, 4.0), 1.0);
        assert_eq!(noncentral_f_sf(f64::INFINITY, 3.0, 5.0, 4.0), 0.0);
        assert_eq!(f_quantile(0.0, 3.0, 5.0), 0.0);
        assert_eq!(f_quantile(1.0, 3.0, 5.0), f64::INFINITY);
        assert_eq!(f_upper_quantile(1.0, 3.0, 5.0), 0.0);
        assert_eq!(f_upper_quantile(0.0, 3.0, 5.0), f64::INFINITY);
        assert_eq!(noncentral_f_quantile(0.0, 3.0, 5.0, 4.0), 0.0);
        assert_eq!(noncentral_f_quantile(1.0, 3.0, 5.0, 4.0), f64::INFINITY);
        // alpha = 0 never rejects, alpha = 1 always does.
        assert_eq!(fixed_power(0.0, 3.0, 5.0, 4.0), 0.0);
        assert_eq!(fixed_power(1.0, 3.0, 5.0, 4.0), 1.0);
        assert_eq!(random_power(0.0, 3.0, 5.0, 0.0), 0.0);
        assert_eq!(random_power(1.0, 3.0, 5.0, f64::INFINITY), 1.0);
        // ratio 0: the term's mean square dwarfs the denominator's.
        assert_eq!(random_power(0.05, 3.0, 5.0, 0.0), 1.0);
        assert_eq!(random_power(0.05, 3.0, 5.0, f64::INFINITY), 0.0);
    }

    /// Valid but extreme arguments: a probability in [0, 1] (or a documented
    /// NaN), quickly; the loops are bounded.
    #[test]
    fn extreme_arguments_stay_in_range() {
        let in_unit = |v: f64| (0.0..=1.0).contains(&v);
        for x in [1e-300, 1e-100, 1e-10, 1e10, 1e100, 1e300] {
            for (df1, df2) in [(1e-3, 5.0), (5.0, 1e-3), (3.0, 10.0), (1e6, 1e6)] {
                for nc in [0.0, 5.0, 500.0, 1e5] {
                    let lower = noncentral_f_cdf(x, df1, df2, nc);
                    let upper = noncentral_f_sf(x, df1, df2, nc);
                    assert!(in_unit(lower) && in_unit(upper), "{x} {df1} {df2} {nc}");
                    assert!((lower + upper - 1.0).abs() < 1e-12, "{x} {df1} {df2} {nc}");
                }
            }
        }
        for p in [1e-300, 1e-12, 0.5, 1.0 - 1e-12] {
            for (df1, df2) in [(1e-3, 5.0), (5.0, 1e-3), (1.0, 1e6), (1e6, 1.0)] {
                let x = f_quantile(p, df1, df2);
                assert!(x >= 0.0, "{p} {df1} {df2} {x}");
                let x = noncentral_f_quantile(p, df1, df2, 50.0);
                assert!(x >= 0.0, "{p} {df1} {df2} {x}");
            }
        }
        assert_eq!(fixed_power(0.05, 3.0, 20.0, 1e8), 1.0);
        let top = noncentral_f_sf(1.0, 3.0, 20.0, MAX_NONCENTRALITY);
        assert_eq!(top, 1.0);
    }

    /// Stirling's remainder against mpmath 1.4.1 (`loggamma(z) − (z − ½) ln z +
    /// z − ½ ln 2π` at 30 digits): the series (z ≥ 10) to its first neglected
    /// term (4e-17 at z = 10), the ln Γ form
    /// (z < 10) to the 3e-14 that `statrs`'s ln Γ allows.
    #[test]
    #[allow(clippy::excessive_precision)] // mpmath's digits, as printed
    fn stirling_remainder_matches_mpmath() {
        let cases = [
            (0.5, 0.153_426_409_720_027_345_29, 3e-14),
            (1.0, 0.081_061_466_795_327_258_22, 3e-14),
            (2.5, 0.033_162_873_519_936_287_485, 3e-14),
            (3.715, 0.022_378_471_957_204_872_099, 3e-14),
            (9.5, 0.008_768_700_134_139_385_463, 3e-14),
            (10.0, 0.008_330_563_433_362_871_256_5, 5e-17),
            (12.5, 0.006_665_247_032_707_682_442_4, 5e-17),
            (20.0, 0.004_166_319_691_996_922_457_5, 5e-17),
            (50.0, 0.001_666_644_446_983_365_509_9, 5e-17),
            (500_000.0, 1.666_666_666_666_444_441_7e-7, 1e-21),
        ];
        for (z, want, tolerance) in cases {
            let got = stirling_remainder(z);
            assert!(
                (got - want).abs() <= tolerance,
                "δ({z}) = {got:e}, mpmath {want:e}"
            );
        }
    }

    /// ln(1 + u) − u against the library ln_1p where that is accurate (|u| not small).
    #[test]
    fn ln1p_minus_matches_ln_1p() {
        for u in [-0.9, -0.5, -0.3, -0.01, 0.01, 0.3, 0.5, 2.0, 1e3] {
            let want = f64::ln_1p(u) - u;
            let got = ln1p_minus(u, 1.0 + u);
            assert!((got - want).abs() <= 1e-15 * want.abs().max(1e-3), "{u}");
        }
        // Small u: ln(1 + u) − u = −u²/2 + u³/3 − …
        let u = 1e-6;
        let want = -u * u / 2.0 + u * u * u / 3.0 - u * u * u * u / 4.0;
        assert!((ln1p_minus(u, 1.0 + u) - want).abs() <= 1e-15 * want.abs());
    }

    /// Poisson probabilities: e^{−μ} μ^k / k! directly where that is exact enough.
    #[test]
    fn poisson_probability_matches_direct_formula() {
        for (k, mu) in [
            (0.0, 3.0),
            (1.0, 0.5),
            (5.0, 5.0),
            (12.0, 7.5),
            (30.0, 40.0),
        ] {
            let direct = (-mu + k * f64::ln(mu) - ln_gamma(k + 1.0)).exp();
            let got = poisson_probability(k, mu);
            assert!((got - direct).abs() <= 1e-13 * direct, "{k} {mu}");
        }
        assert_eq!(poisson_probability(0.0, 0.0), 1.0);
        assert_eq!(poisson_probability(3.0, 0.0), 0.0);
    }

    /// The continued fraction and the mixture report non-convergence as NaN,
    /// not as a wrong number: both shape parameters at 1e300 cannot converge
    /// within the iteration bound.
    #[test]
    fn non_convergence_is_nan() {
        assert!(f_cdf(1.0, 1e300, 1e300).is_nan());
        assert!(continued_fraction(1e300, 1e300, 0.5, 0.5).is_none());
    }
}
