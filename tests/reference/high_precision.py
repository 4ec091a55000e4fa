"""High-precision reference values for emsplan's F distribution numerics.

Writes tests/reference/high_precision.json next to this script, read by
tests/dist_reference.rs. Every value is computed with mpmath at 30
significant digits and rounded once to a double, independently of scipy:

  central F           I_y(df1/2, df2/2), y = df1 x / (df1 x + df2), by
                      mpmath.betainc(..., regularized=True)
  noncentral F        the Poisson mixture sum_j Pois(j; nc/2) I_y(df1/2 + j, df2/2)
                      (Johnson, Kotz & Balakrishnan 1995, ch. 30) over the mode
                      +- 12 sd, far beyond where its terms matter at 30 digits
  central quantiles   mpmath.findroot on the above, from scipy's estimate
  power               the noncentral upper tail at the exact critical value

The points include the places where scipy's own values were found to be least
accurate (df2 = 1e6, large nc, the upper quantile for small q).

    python3 tests/reference/high_precision.py
"""

import json
import pathlib
import platform

import mpmath as mp
from scipy import stats

mp.mp.dps = 30


def beta_point(x, d1, d2):
    x, d1, d2 = mp.mpf(x), mp.mpf(d1), mp.mpf(d2)
    return d1 * x / (d1 * x + d2), d2 / (d1 * x + d2)


def central(x, d1, d2):
    """(cdf, sf) of F(d1, d2) at x."""
    y, w = beta_point(x, d1, d2)
    a, b = mp.mpf(d1) / 2, mp.mpf(d2) / 2
    return mp.betainc(a, b, 0, y, regularized=True), mp.betainc(b, a, 0, w, regularized=True)


def noncentral(x, d1, d2, nc):
    """(cdf, sf) of F'(d1, d2, nc) at x."""
    if nc == 0:
        return central(x, d1, d2)
    y, w = beta_point(x, d1, d2)
    a, b, mu = mp.mpf(d1) / 2, mp.mpf(d2) / 2, mp.mpf(nc) / 2
    mode = int(mu)
    width = int(12 * mp.sqrt(mu + 1)) + 40
    lower, upper = mp.mpf(0), mp.mpf(0)
    for j in range(max(0, mode - width), mode + width):
        weight = mp.exp(-mu + j * mp.log(mu) - mp.loggamma(j + 1))
        lower += weight * mp.betainc(a + j, b, 0, y, regularized=True)
        upper += weight * mp.betainc(b, a + j, 0, w, regularized=True)
    return lower, upper


def upper_point(q, d1, d2):
    """x with sf(x) = q, by mpmath.findroot (secant) on log sf in log x."""
    q = mp.mpf(q)
    guess = stats.f.isf(float(q), d1, d2)
    s = mp.findroot(lambda s: mp.log(central(mp.exp(s), d1, d2)[1]) - mp.log(q), mp.log(guess))
    return mp.exp(s)


def lower_point(p, d1, d2):
    p = mp.mpf(p)
    guess = stats.f.ppf(float(p), d1, d2)
    s = mp.findroot(lambda s: mp.log(central(mp.exp(s), d1, d2)[0]) - mp.log(p), mp.log(guess))
    return mp.exp(s)


def main():
    probabilities, quantiles, powers = [], [], []

    def probability(x, d1, d2, nc):
        cdf, sf = noncentral(x, d1, d2, nc)
        probabilities.append(
            {"x": float(x), "df1": d1, "df2": d2, "nc": nc, "cdf": float(cdf), "sf": float(sf)}
        )

    # Where scipy was least accurate.
    probability(2.467401100276398e-12, 1.0, 1.0, 0.0)
    probability(6.058056055850055, 12.0, 1e6, 0.0)
    probability(1.0855832973076758, 50.0, 1e6, 5.0)
    probability(28.508160108398418, 2.0, 1e6, 5.0)
    probability(254441.133681956, 2.0, 1.0, 2000.0)
    # A spread over the grid: the median and the 1e-9 upper point of each.
    probability(float(stats.ncf.isf(0.5, 5.0, 1e6, 2000.0)), 5.0, 1e6, 2000.0)
    for d1 in [1.0, 50.0]:
        for d2 in [7.43, 1e6]:
            for nc in [0.0, 20.0, 500.0]:
                dist = (d1, d2) if nc == 0.0 else (d1, d2, nc)
                law = stats.f if nc == 0.0 else stats.ncf
                for q in [0.5, 1e-9]:
                    probability(float(law.isf(q, *dist)), d1, d2, nc)

    for q, d1, d2 in [(1e-6, 2.0, 1.0), (0.05, 1.0, 1e6), (0.01, 12.0, 1e6), (1e-10, 3.0, 7.43),
                      (0.05, 50.0, 2.5), (0.001, 5.0, 30.0)]:
        quantiles.append({"tail": "upper", "p": q, "df1": d1, "df2": d2,
                          "x": float(upper_point(q, d1, d2))})
    for p, d1, d2 in [(0.5, 12.0, 1.0), (1e-4, 3.0, 1e6), (0.05, 1.0, 30.0), (1e-8, 7.43, 7.43)]:
        quantiles.append({"tail": "lower", "p": p, "df1": d1, "df2": d2,
                          "x": float(lower_point(p, d1, d2))})

    for alpha, d1, d2, nc in [(0.01, 2.0, 1e6, 5.0), (0.05, 3.0, 176.0, 11.25),
                              (0.05, 1.0, 126.0, 8.0), (0.001, 12.0, 1e4, 150.0),
                              (0.05, 5.0, 7.43, 20.0), (0.01, 50.0, 1e6, 500.0)]:
        crit = upper_point(alpha, d1, d2)
        powers.append({"alpha": alpha, "df1": d1, "df2": d2, "nc": nc,
                       "power": float(noncentral(crit, d1, d2, nc)[1])})

    out = {
        "generator": "tests/reference/high_precision.py",
        "source": f"mpmath {mp.__version__} at {mp.mp.dps} significant digits",
        "python_version": platform.python_version(),
        "probabilities": probabilities,
        "quantiles": quantiles,
        "power": powers,
    }
    path = pathlib.Path(__file__).with_name("high_precision.json")
    path.write_text(json.dumps(out, indent=1) + "\n")
    print(f"wrote {path}: {len(probabilities)} probabilities, {len(quantiles)} quantiles, "
          f"{len(powers)} powers")


if __name__ == "__main__":
    main()
