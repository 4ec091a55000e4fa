"""Reference values for emsplan's F distribution numerics, taken from scipy.

Writes tests/reference/noncentral_f.json next to this script. The Rust test
tests/dist_reference.rs reads that file, so the test suite needs no Python;
rerun this script (with scipy installed) only to regenerate it.

    python3 tests/reference/noncentral_f.py

Sources of every value, all in scipy.stats:
  central cdf / sf      f.cdf, f.sf
  central quantiles     f.ppf (lower tail); the upper-tail point x with
                        sf(x) = q as (df2/df1)(1 - w)/w, w = betaincinv(df2/2,
                        df1/2, q) from scipy.special (f.isf goes through
                        1 - q, which costs ~1e-16/q of relative accuracy)
  noncentral cdf / sf   ncf.cdf, ncf.sf   (nc is lambda, the sum-of-squares
                                           convention; the Poisson mean is nc/2),
                        also far in both tails, at ncf.isf(q) and ncf.ppf(p)
  noncentral quantiles  ncf.ppf
  fixed-term power      ncf.sf(f.ppf(1 - alpha, d1, d2), d1, d2, nc)
  random-term power     f.sf(f.ppf(1 - alpha, d1, d2) * ratio, d1, d2)
"""

import json
import math
import pathlib
import platform
import warnings

import numpy
import scipy
from scipy import special, stats

DF1 = [1.0, 2.0, 3.0, 5.0, 12.0, 50.0]
DF2 = [1.0, 2.5, 7.43, 10.0, 30.0, 120.0, 1e4, 1e6]
NC = [0.5, 5.0, 20.0, 150.0, 500.0, 2000.0]

CENTRAL_P = [1e-6, 0.01, 0.1, 0.5, 0.9, 0.99, 1.0 - 1e-6]
CENTRAL_TINY_SF = [1e-10, 1e-14]
NONCENTRAL_P = [0.001, 0.05, 0.5, 0.95, 0.999]
QUANTILE_P = [1e-4, 0.05, 0.5, 0.95, 0.999]
UPPER_Q = [0.05, 0.01, 0.001, 1e-6]
NONCENTRAL_QUANTILE_P = [0.05, 0.5, 0.95]
NONCENTRAL_TINY = [1e-7, 1e-11]
TAIL_NC = [5.0, 150.0, 2000.0]
ALPHA = [0.05, 0.01, 0.001]
POWER_NC = [0.0, 0.5, 2.0, 5.0, 10.0, 20.0, 50.0, 150.0, 500.0, 2000.0]
RANDOM_ALPHA = [0.05, 0.01]
RATIO = [1.0, 0.5, 0.2, 0.05, 0.01]


def f(v):
    """A finite Python float, or a refusal to record a non-finite reference."""
    v = float(v)
    if not math.isfinite(v):
        raise ValueError("non-finite reference value")
    return v


def main():
    central, central_tail = [], []
    central_quantile, central_upper_quantile = [], []
    noncentral, noncentral_tail, noncentral_quantile = [], [], []
    power, random_power = [], []

    for d1 in DF1:
        for d2 in DF2:
            points = [f(stats.f.ppf(p, d1, d2)) for p in CENTRAL_P] + [1.0]
            for x in points:
                central.append(
                    {"x": x, "df1": d1, "df2": d2,
                     "cdf": f(stats.f.cdf(x, d1, d2)), "sf": f(stats.f.sf(x, d1, d2))}
                )
            for q in CENTRAL_TINY_SF:
                x = f(stats.f.isf(q, d1, d2))
                central_tail.append(
                    {"x": x, "df1": d1, "df2": d2, "sf": f(stats.f.sf(x, d1, d2))}
                )
            for p in QUANTILE_P:
                central_quantile.append(
                    {"p": p, "df1": d1, "df2": d2, "x": f(stats.f.ppf(p, d1, d2))}
                )
            for q in UPPER_Q:
                w = special.betaincinv(d2 / 2.0, d1 / 2.0, q)
                central_upper_quantile.append(
                    {"q": q, "df1": d1, "df2": d2, "x": f(d2 / d1 * (1.0 - w) / w)}
                )
            for nc in NC:
                for p in NONCENTRAL_P:
                    x = f(stats.ncf.ppf(p, d1, d2, nc))
                    noncentral.append(
                        {"x": x, "df1": d1, "df2": d2, "nc": nc,
                         "cdf": f(stats.ncf.cdf(x, d1, d2, nc)),
                         "sf": f(stats.ncf.sf(x, d1, d2, nc))}
                    )
                if nc in TAIL_NC:
                    for q in NONCENTRAL_TINY:
                        for tail, point, prob in [
                            ("upper", stats.ncf.isf, stats.ncf.sf),
                            ("lower", stats.ncf.ppf, stats.ncf.cdf),
                        ]:
                            # Where scipy cannot place or evaluate a point
                            # (its quantile overflows for df2 = 1), skip it.
                            try:
                                x = f(point(q, d1, d2, nc))
                                value = f(prob(x, d1, d2, nc))
                            except (OverflowError, ValueError, RuntimeWarning):
                                continue
                            noncentral_tail.append(
                                {"x": x, "df1": d1, "df2": d2, "nc": nc, "tail": tail,
                                 "value": value}
                            )
                for p in NONCENTRAL_QUANTILE_P:
                    noncentral_quantile.append(
                        {"p": p, "df1": d1, "df2": d2, "nc": nc,
                         "x": f(stats.ncf.ppf(p, d1, d2, nc))}
                    )
            for alpha in ALPHA:
                crit = stats.f.ppf(1.0 - alpha, d1, d2)
                for nc in POWER_NC:
                    value = stats.f.sf(crit, d1, d2) if nc == 0.0 else stats.ncf.sf(crit, d1, d2, nc)
                    power.append(
                        {"alpha": alpha, "df1": d1, "df2": d2, "nc": nc, "power": f(value)}
                    )
            for alpha in RANDOM_ALPHA:
                crit = stats.f.ppf(1.0 - alpha, d1, d2)
                for ratio in RATIO:
                    random_power.append(
                        {"alpha": alpha, "df1": d1, "df2": d2, "ratio": ratio,
                         "power": f(stats.f.sf(crit * ratio, d1, d2))}
                    )

    out = {
        "generator": "tests/reference/noncentral_f.py",
        "source": f"scipy {scipy.__version__} (scipy.stats.f, scipy.stats.ncf)",
        "scipy_version": scipy.__version__,
        "numpy_version": numpy.__version__,
        "python_version": platform.python_version(),
        "central": central,
        "central_tail": central_tail,
        "central_quantile": central_quantile,
        "central_upper_quantile": central_upper_quantile,
        "noncentral": noncentral,
        "noncentral_tail": noncentral_tail,
        "noncentral_quantile": noncentral_quantile,
        "power": power,
        "random_power": random_power,
    }
    path = pathlib.Path(__file__).with_name("noncentral_f.json")
    path.write_text(json.dumps(out, indent=1) + "\n")
    counts = {k: len(v) for k, v in out.items() if isinstance(v, list)}
    print(f"wrote {path} from scipy {scipy.__version__}: {counts}")


if __name__ == "__main__":
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        main()
