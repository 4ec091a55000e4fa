//! The F distribution numerics against published tables and closed forms.

use emsplan::dist::{f_cdf, f_sf, fixed_power, noncentral_f_cdf, noncentral_f_sf, random_power};
use std::f64::consts::PI;

/// Smallest n per group at which the one-way fixed-effects F test of k groups
/// reaches power 0.80 at alpha = 0.05, with Cohen's f = σ_means/σ, so that
/// λ = f² k n, df1 = k − 1, df2 = k (n − 1).
fn smallest_n_for_power(k: f64, f: f64, target: f64) -> f64 {
    let mut n = 2.0;
    while fixed_power(0.05, k - 1.0, k * (n - 1.0), f * f * k * n) < target {
        n += 1.0;
        assert!(n < 10_000.0, "no n found for k = {k}, f = {f}");
    }
    n
}

/// Cohen (1992), "A power primer", Psychological Bulletin 112, 155–159,
/// Table 2 (summarising Cohen 1988, Statistical Power Analysis for the
/// Behavioral Sciences, ch. 8): n per group for power 0.80 at alpha = 0.05 in
/// a one-way ANOVA with small (f = .10), medium (.25) and large (.40) effects.
/// These values are quoted from memory.
///
/// Tolerance: Cohen's n were read from power tables built on an approximation
/// to the noncentral F and rounded to whole subjects, so the exact smallest n
/// may differ by one. (The exact values come out equal or one larger: for
/// k = 4, f = .25, n = 45 exactly, power 0.804; k = 2, f = .25 is the
/// two-sample t test with d = .5, n = 64, power 0.8015.)
#[test]
fn cohen_sample_sizes_for_one_way_anova() {
    let table = [
        // k, [f = .10, f = .25, f = .40]
        (2.0, [393.0, 64.0, 26.0]),
        (3.0, [322.0, 52.0, 21.0]),
        (4.0, [274.0, 45.0, 18.0]),
        (5.0, [240.0, 39.0, 16.0]),
        (6.0, [215.0, 35.0, 14.0]),
        (7.0, [195.0, 32.0, 13.0]),
    ];
    for (k, row) in table {
        for (f, cohen_n) in [0.10, 0.25, 0.40].into_iter().zip(row) {
            let n = smallest_n_for_power(k, f, 0.80);
            assert!(
                (n - cohen_n).abs() <= 1.0,
                "k = {k}, f = {f}: exact n = {n}, Cohen {cohen_n}"
            );
        }
    }
    // The medium effect with four groups lands exactly on the table.
    assert_eq!(smallest_n_for_power(4.0, 0.25, 0.80), 45.0);
}

/// Relative agreement, the tolerance for a closed form evaluated in floating point.
fn assert_close(got: f64, want: f64, rel: f64, case: &str) {
    let err = (got - want).abs() / want.abs().max(f64::MIN_POSITIVE);
    assert!(
        err <= rel,
        "{case}: got {got:e}, want {want:e}, rel {err:e}"
    );
}

const XS: [f64; 9] = [1e-6, 1e-3, 0.1, 0.5, 1.0, 3.0, 20.0, 1e3, 1e6];

/// df1 = 2: I_y(1, b) = 1 − (1 − y)^b, so 1 − F(x) = (1 + 2x/df2)^(−df2/2).
#[test]
fn central_f_with_two_numerator_df() {
    for df2 in [1.0, 2.5, 7.43, 30.0, 1e4, 1e6] {
        for x in XS {
            let ln_sf = -0.5 * df2 * (2.0 * x / df2).ln_1p();
            let case = format!("F(2, {df2}) at {x}");
            assert_close(f_sf(x, 2.0, df2), ln_sf.exp(), 1e-12, &case);
            assert_close(f_cdf(x, 2.0, df2), -ln_sf.exp_m1(), 1e-12, &case);
        }
    }
}

/// df2 = 2: I_y(a, 1) = y^a, so F(x) = y^(df1/2), y = df1 x / (df1 x + 2).
#[test]
fn central_f_with_two_denominator_df() {
    for df1 in [1.0, 3.0, 7.43, 50.0] {
        for x in XS {
            let ln_y = -(2.0 / (df1 * x)).ln_1p();
            let case = format!("F({df1}, 2) at {x}");
            assert_close(f_cdf(x, df1, 2.0), (0.5 * df1 * ln_y).exp(), 1e-12, &case);
            assert_close(
                f_sf(x, df1, 2.0),
                -(0.5 * df1 * ln_y).exp_m1(),
                1e-12,
                &case,
            );
        }
    }
}

/// df1 = df2 = 1: I_y(½, ½) = (2/π) arcsin √y, so F(x) = (2/π) arctan √x.
#[test]
fn central_f_with_one_and_one_df() {
    for x in XS {
        let case = format!("F(1, 1) at {x}");
        assert_close(f_cdf(x, 1.0, 1.0), 2.0 / PI * x.sqrt().atan(), 1e-13, &case);
        // 1 − (2/π) arctan √x = (2/π) arctan(1/√x).
        assert_close(
            f_sf(x, 1.0, 1.0),
            2.0 / PI * (1.0 / x.sqrt()).atan(),
            1e-13,
            &case,
        );
    }
}

/// Noncentral F with df2 = 2. In the Poisson mixture I_y(a + j, 1) = y^(a+j),
/// so F'(x) = Σ_j e^(−μ) μ^j/j! y^(a+j) = y^a exp(−μ (1 − y)), μ = λ/2. This
/// exercises the mixture's recurrences, both directions from the mode, and
/// its tails, against an exact sum.
#[test]
fn noncentral_f_with_two_denominator_df() {
    for df1 in [1.0, 3.0, 12.0, 50.0] {
        for nc in [0.5, 5.0, 20.0, 150.0, 500.0, 2000.0] {
            for x in XS.into_iter().chain([10.0 * nc, 100.0 * nc]) {
                let w = 2.0 / (df1 * x + 2.0);
                let ln_y = -(2.0 / (df1 * x)).ln_1p();
                let ln_cdf = 0.5 * df1 * ln_y - 0.5 * nc * w;
                let cdf = ln_cdf.exp();
                let sf = -ln_cdf.exp_m1();
                let case = format!("F'({df1}, 2, {nc}) at {x}");
                if cdf > 1e-290 {
                    assert_close(noncentral_f_cdf(x, df1, 2.0, nc), cdf, 1e-11, &case);
                }
                assert_close(noncentral_f_sf(x, df1, 2.0, nc), sf, 1e-11, &case);
            }
        }
    }
}

/// Power with df2 = 2, from the closed form above: the critical value has
/// y_c^(df1/2) = 1 − alpha, so power = 1 − (1 − alpha) exp(−(λ/2)(1 − y_c)).
/// A random term: 1 − y^(df1/2) at y = df1 r x_c / (df1 r x_c + 2).
#[test]
fn power_with_two_denominator_df() {
    for alpha in [0.05_f64, 0.01, 0.001] {
        for df1 in [1.0_f64, 3.0, 12.0] {
            let w_c = -((2.0 / df1) * (-alpha).ln_1p()).exp_m1();
            let y_c = 1.0 - w_c;
            for nc in [0.0_f64, 0.5, 5.0, 20.0, 150.0, 500.0] {
                let want = 1.0 - (1.0 - alpha) * (-0.5 * nc * w_c).exp();
                let case = format!("alpha {alpha}, F'({df1}, 2, {nc})");
                assert_close(fixed_power(alpha, df1, 2.0, nc), want, 1e-11, &case);
            }
            let x_c = 2.0 * y_c / (df1 * w_c);
            for ratio in [1.0, 0.5, 0.1, 0.01] {
                let y = df1 * ratio * x_c / (df1 * ratio * x_c + 2.0);
                let want = 1.0 - y.powf(0.5 * df1);
                let case = format!("alpha {alpha}, F({df1}, 2), ratio {ratio}");
                assert_close(random_power(alpha, df1, 2.0, ratio), want, 1e-11, &case);
            }
        }
    }
}
