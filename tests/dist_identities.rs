//! Identities of distribution theory that the F numerics must satisfy.

use emsplan::dist::{
    CriticalValue, f_cdf, f_quantile, f_sf, f_upper_quantile, fixed_power, noncentral_f_cdf,
    noncentral_f_quantile, noncentral_f_sf, random_power,
};
use proptest::prelude::*;

const DF: [f64; 8] = [1.0, 2.0, 3.0, 7.43, 12.0, 50.0, 1e4, 1e6];
const ALPHAS: [f64; 3] = [0.05, 0.01, 0.001];

/// λ = 0 is the central distribution.
#[test]
fn zero_noncentrality_is_central() {
    for df1 in DF {
        for df2 in DF {
            for x in [0.01, 0.5, 1.0, 2.0, 10.0, 1e3] {
                let case = format!("F({df1}, {df2}) at {x}");
                let cdf = f_cdf(x, df1, df2);
                let sf = f_sf(x, df1, df2);
                assert!(
                    (noncentral_f_cdf(x, df1, df2, 0.0) - cdf).abs() <= 1e-15,
                    "{case}"
                );
                assert!(
                    (noncentral_f_sf(x, df1, df2, 0.0) - sf).abs() <= 1e-15 * sf,
                    "{case}"
                );
            }
            for p in [1e-6, 0.05, 0.5, 0.95] {
                let x = f_quantile(p, df1, df2);
                let nx = noncentral_f_quantile(p, df1, df2, 0.0);
                assert!((nx - x).abs() <= 1e-14 * x, "F({df1}, {df2}) p = {p}");
            }
        }
    }
}

/// Under the null hypothesis the test rejects with probability alpha: power at
/// λ = 0, and random-term power at ratio E(MS_den)/E(MS_term) = 1.
#[test]
fn power_at_the_null_is_alpha() {
    for alpha in ALPHAS {
        for df1 in DF {
            for df2 in DF {
                let case = format!("alpha {alpha}, df ({df1}, {df2})");
                let fixed = fixed_power(alpha, df1, df2, 0.0);
                let random = random_power(alpha, df1, df2, 1.0);
                assert!((fixed - alpha).abs() <= 1e-12 * alpha, "{case}: {fixed}");
                assert!((random - alpha).abs() <= 1e-12 * alpha, "{case}: {random}");
            }
        }
    }
}

/// Power rises with the noncentrality, from alpha towards one; random-term
/// power falls as the ratio E(MS_den)/E(MS_term) rises towards one.
#[test]
fn power_is_monotone() {
    let ncs = [
        0.0, 0.1, 0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0, 150.0, 300.0,
    ];
    for df1 in [1.0, 3.0, 12.0] {
        for df2 in [2.5, 7.43, 30.0, 1e4] {
            let critical = CriticalValue::new(0.05, df1, df2);
            let powers: Vec<f64> = ncs.iter().map(|&nc| critical.fixed_power(nc)).collect();
            for pair in powers.windows(2) {
                assert!(
                    pair[0] < pair[1] || pair[1] == 1.0,
                    "df ({df1}, {df2}): {powers:?}"
                );
            }
            let ratios = [0.001, 0.01, 0.1, 0.3, 0.6, 1.0, 2.0];
            let powers: Vec<f64> = ratios.iter().map(|&r| critical.random_power(r)).collect();
            for pair in powers.windows(2) {
                assert!(pair[0] > pair[1], "df ({df1}, {df2}): {powers:?}");
            }
        }
    }
}

/// 1/F(df1, df2) is F(df2, df1): F(x; df1, df2) = 1 − F(1/x; df2, df1), and the
/// p-quantile of one is the reciprocal of the upper p-point of the other.
#[test]
fn reciprocal_swaps_the_degrees_of_freedom() {
    for df1 in DF {
        for df2 in DF {
            for x in [1e-3, 0.3, 1.0, 4.0, 1e3] {
                let lower = f_cdf(x, df1, df2);
                let swapped = f_sf(1.0 / x, df2, df1);
                assert!(
                    (lower - swapped).abs() <= 1e-13 * lower.max(1e-300),
                    "F({df1}, {df2}) at {x}: {lower:e} vs {swapped:e}"
                );
            }
            for p in [1e-4, 0.05, 0.5, 0.95] {
                let x = f_quantile(p, df1, df2);
                let y = f_upper_quantile(p, df2, df1);
                assert!((x * y - 1.0).abs() <= 1e-13, "F({df1}, {df2}) p = {p}");
            }
        }
    }
}

fn log_uniform(lo: f64, hi: f64) -> impl Strategy<Value = f64> {
    (lo.ln()..hi.ln()).prop_map(f64::exp)
}

fn df() -> impl Strategy<Value = f64> {
    log_uniform(0.5, 1e6)
}

fn noncentrality() -> impl Strategy<Value = f64> {
    prop_oneof![Just(0.0), log_uniform(1e-3, 3000.0)]
}

proptest! {
    /// The two tails add to one, each is a probability, and the lower tail
    /// rises with x.
    #[test]
    fn tails_are_complementary_and_monotone(
        x in log_uniform(1e-4, 1e4), step in 1.0001..3.0_f64,
        df1 in df(), df2 in df(), nc in noncentrality(),
    ) {
        let lower = noncentral_f_cdf(x, df1, df2, nc);
        let upper = noncentral_f_sf(x, df1, df2, nc);
        prop_assert!((0.0..=1.0).contains(&lower) && (0.0..=1.0).contains(&upper));
        prop_assert!((lower + upper - 1.0).abs() <= 1e-14, "{} + {}", lower, upper);
        let further = noncentral_f_cdf(x * step, df1, df2, nc);
        prop_assert!(further >= lower - 1e-15, "{} then {}", lower, further);
    }

    /// A larger noncentrality moves mass upwards: the CDF falls.
    #[test]
    fn cdf_falls_as_noncentrality_rises(
        x in log_uniform(1e-2, 1e3), df1 in df(), df2 in df(),
        nc in log_uniform(1e-3, 2000.0), factor in 1.01..2.0_f64,
    ) {
        let before = noncentral_f_cdf(x, df1, df2, nc);
        let after = noncentral_f_cdf(x, df1, df2, nc * factor);
        prop_assert!(after <= before + 1e-15, "{} then {}", before, after);
    }

    /// The quantile inverts the CDF, in whichever tail is the smaller.
    #[test]
    fn quantile_inverts_cdf(
        p in 1e-9..(1.0 - 1e-9), df1 in df(), df2 in df(), nc in noncentrality(),
    ) {
        let x = noncentral_f_quantile(p, df1, df2, nc);
        prop_assert!(x > 0.0 && x.is_finite(), "x = {}", x);
        if p <= 0.5 {
            let back = noncentral_f_cdf(x, df1, df2, nc);
            prop_assert!((back - p).abs() <= 1e-10 * p, "p {} back {}", p, back);
        } else {
            let back = noncentral_f_sf(x, df1, df2, nc);
            prop_assert!((back - (1.0 - p)).abs() <= 1e-10 * (1.0 - p), "q {} back {}", 1.0 - p, back);
        }
    }

    /// The upper quantile inverts the upper tail, down to tiny levels.
    #[test]
    fn upper_quantile_inverts_sf(q in log_uniform(1e-12, 0.5), df1 in df(), df2 in df()) {
        let x = f_upper_quantile(q, df1, df2);
        let back = f_sf(x, df1, df2);
        prop_assert!((back - q).abs() <= 1e-10 * q, "q {} back {}", q, back);
    }

    /// CriticalValue's power series from zero and the mode-centred mixture agree.
    #[test]
    fn critical_value_paths_agree(
        alpha in log_uniform(1e-6, 0.5), df1 in df(), df2 in df(),
        nc in log_uniform(1e-3, 2.0 * CriticalValue::SERIES_FROM_ZERO_UP_TO),
    ) {
        let critical = CriticalValue::new(alpha, df1, df2);
        let series = critical.fixed_power(nc);
        let mixture = noncentral_f_sf(critical.value(), df1, df2, nc);
        prop_assert!((series - mixture).abs() <= 1e-12 * mixture, "{} vs {}", series, mixture);
        prop_assert!(series >= alpha * (1.0 - 1e-12), "power {} below alpha {}", series, alpha);
    }
}
