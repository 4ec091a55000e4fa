"""Reference values for emsplan's analyze and simulate tests, from general-purpose libraries.

Run from the repository root:

    pip install statsmodels scipy pandas
    python3 tests/reference/anova_reference.py            # writes anova_reference.json
    python3 tests/reference/anova_reference.py --write-fixtures   # also (re)writes the CSVs

The output, tests/reference/anova_reference.json, is committed, so the Rust tests need no
Python. It holds, for each fixture data set in tests/fixtures/data/:

- statsmodels' anova_lm (typ=1, sequential sums of squares; on balanced data with the
  terms in marginal order these equal the classical balanced ANOVA): sum_sq, df, and F and
  PR(>F) over the residual mean square;
- the planned tests computed here by hand from those sums of squares: each term's F over
  its error term as written out below from the textbook expected mean squares
  (Montgomery, Design and Analysis of Experiments, chapters on nested and mixed models;
  restricted model), the quasi-F with Satterthwaite's (1946) df where there is no exact
  test, and p from scipy.stats.f.sf;
- the variance components by the method of moments: the expected-mean-square equations,
  with coefficients written out here from the same textbook rules, solved with
  numpy.linalg.solve (independently of emsplan's back-substitution).

It also holds an independent Monte Carlo of the quasi-F test of `recipe` in
problems/coating-lines.toml under its null hypothesis: in a balanced design the mean
squares are independent scaled chi-squares (Cochran's theorem), so they are drawn
directly as E(MS) chi2(df)/df, with E(MS) written out by hand from the planning values.

The fixture data are invented (numpy's PCG64 with the seeds below), in scenarios of our own.
"""

import json
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import scipy
import statsmodels
import statsmodels.formula.api as smf
from scipy import stats
from statsmodels.stats.anova import anova_lm

ROOT = Path(__file__).resolve().parents[2]
DATA = ROOT / "tests" / "fixtures" / "data"


def write_fixtures():
    DATA.mkdir(parents=True, exist_ok=True)
    # Coating thickness (um): recipe (fixed, 2) x line (random, 4) x shift (random, 3), 2 panels.
    rng = np.random.default_rng(20240611)
    line = rng.normal(0, 1.5, 4)
    shift = rng.normal(0, 1.0, 3)
    rl = rng.normal(0, 0.8, (2, 4))
    rs = rng.normal(0, 0.6, (2, 3))
    ls = rng.normal(0, 0.5, (4, 3))
    rows = []
    for r in range(2):
        for l in range(4):
            for s in range(3):
                for _ in range(2):
                    y = 40 + (1.0 if r else -1.0) + line[l] + shift[s] + rl[r, l] + rs[r, s] + ls[l, s] + rng.normal(0, 2.0)
                    rows.append((f"recipe{r + 1}", f"line{l + 1}", f"shift{s + 1}", round(y, 2)))
    pd.DataFrame(rows, columns=["recipe", "line", "shift", "thickness"]).to_csv(DATA / "coating-crossed.csv", index=False)

    # Shoot mass (g): light (fixed, 3) / chamber (random, 3 in each light) x cultivar (fixed, 4),
    # 3 pots; chambers numbered within their light.
    rng = np.random.default_rng(20240612)
    rows = []
    for a in range(3):
        for c in range(3):
            ch = rng.normal(0, 0.8)
            for v in range(4):
                cc = rng.normal(0, 0.4)
                for _ in range(3):
                    y = 12 + 0.7 * (a - 1) + 0.3 * (v - 1.5) + ch + cc + rng.normal(0, 1.2)
                    rows.append((f"light{a + 1}", f"chamber{c + 1}", f"cultivar{v + 1}", round(y, 2)))
    pd.DataFrame(rows, columns=["light", "chamber", "cultivar", "mass"]).to_csv(DATA / "chambers-nested.csv", index=False)

    # Purity (%): batch (random, 5) / sample (random, 3 per batch, labelled s1..s15 across
    # batches) / 2 determinations.
    rng = np.random.default_rng(20240613)
    rows = []
    for b in range(5):
        bb = rng.normal(0, 0.9)
        for s in range(3):
            ss = rng.normal(0, 0.5)
            for _ in range(2):
                rows.append((f"batch{b + 1}", f"s{3 * b + s + 1}", round(97 + bb + ss + rng.normal(0, 0.3), 3)))
    pd.DataFrame(rows, columns=["batch", "sample", "purity"]).to_csv(DATA / "batches-nested.csv", index=False)


def anova(df, formula, names):
    table = anova_lm(smf.ols(formula, data=df).fit(), typ=1)
    out = {}
    for key, name in names.items():
        row = table.loc[key]
        out[name] = {"ss": float(row["sum_sq"]), "df": float(row["df"]), "f_over_residual": None if pd.isna(row["F"]) else float(row["F"]), "p_over_residual": None if pd.isna(row["PR(>F)"]) else float(row["PR(>F)"])}
    return out


def ms(terms, name):
    return terms[name]["ss"] / terms[name]["df"]


def exact(terms, name, over):
    f = ms(terms, name) / ms(terms, over)
    return {"f": f, "df1": terms[name]["df"], "df2": terms[over]["df"], "p": float(stats.f.sf(f, terms[name]["df"], terms[over]["df"]))}


def quasi(terms, name, plus, minus):
    parts = [(1.0, p) for p in plus] + [(-1.0, m) for m in minus]
    d = sum(w * ms(terms, t) for w, t in parts)
    df2 = d * d / sum((w * ms(terms, t)) ** 2 / terms[t]["df"] for w, t in parts)
    f = ms(terms, name) / d
    return {"f": f, "df1": terms[name]["df"], "df2": df2, "p": float(stats.f.sf(f, terms[name]["df"], df2))}


def moments(terms, rows, names):
    """Solves MS = A theta, one row per mean square, one column per component."""
    a = np.array([[float(c) for c in row] for _, row in rows])
    b = np.array([ms(terms, t) for t, _ in rows])
    theta = np.linalg.solve(a, b)
    return dict(zip(names, map(float, theta)))


def coating():
    df = pd.read_csv(DATA / "coating-crossed.csv")
    names = {
        "C(recipe)": "recipe", "C(line)": "line", "C(shift)": "shift",
        "C(recipe):C(line)": "recipe x line", "C(recipe):C(shift)": "recipe x shift",
        "C(line):C(shift)": "line x shift", "C(recipe):C(line):C(shift)": "recipe x line x shift",
        "Residual": "residual",
    }
    t = anova(df, "thickness ~ C(recipe) * C(line) * C(shift)", names)
    planned = {
        "recipe": quasi(t, "recipe", ["recipe x line", "recipe x shift"], ["recipe x line x shift"]),
        "line": exact(t, "line", "line x shift"),
        "shift": exact(t, "shift", "line x shift"),
        "recipe x line": exact(t, "recipe x line", "recipe x line x shift"),
        "recipe x shift": exact(t, "recipe x shift", "recipe x line x shift"),
        "line x shift": exact(t, "line x shift", "residual"),
        "recipe x line x shift": exact(t, "recipe x line x shift", "residual"),
    }
    # Restricted model, a = 2 recipes, b = 4 lines, c = 3 shifts, n = 2 (Montgomery's
    # three-factor mixed model): components in the order
    # line, shift, r x l, r x s, l x s, r x l x s, residual.
    rows = [
        ("line", [12, 0, 0, 0, 4, 0, 1]),
        ("shift", [0, 16, 0, 0, 4, 0, 1]),
        ("recipe x line", [0, 0, 6, 0, 0, 2, 1]),
        ("recipe x shift", [0, 0, 0, 8, 0, 2, 1]),
        ("line x shift", [0, 0, 0, 0, 4, 0, 1]),
        ("recipe x line x shift", [0, 0, 0, 0, 0, 2, 1]),
        ("residual", [0, 0, 0, 0, 0, 0, 1]),
    ]
    comps = moments(t, rows, ["line", "shift", "recipe x line", "recipe x shift", "line x shift", "recipe x line x shift", "residual"])
    return {"layout": "problems/coating-lines.toml", "data": "tests/fixtures/data/coating-crossed.csv", "terms": t, "planned": planned, "components": comps}


def chambers():
    df = pd.read_csv(DATA / "chambers-nested.csv")
    names = {
        "C(light)": "light", "C(light):C(chamber)": "chamber(light)", "C(cultivar)": "cultivar",
        "C(light):C(cultivar)": "light x cultivar",
        "C(light):C(chamber):C(cultivar)": "chamber x cultivar(light)", "Residual": "residual",
    }
    t = anova(df, "mass ~ C(light) + C(cultivar) + C(light):C(cultivar) + C(light):C(chamber) + C(light):C(chamber):C(cultivar)", names)
    planned = {
        "light": exact(t, "light", "chamber(light)"),
        "chamber(light)": exact(t, "chamber(light)", "residual"),
        "cultivar": exact(t, "cultivar", "chamber x cultivar(light)"),
        "light x cultivar": exact(t, "light x cultivar", "chamber x cultivar(light)"),
        "chamber x cultivar(light)": exact(t, "chamber x cultivar(light)", "residual"),
    }
    # Restricted model, 4 cultivars, 3 pots: E(MS chamber(light)) = s2 + 12 s2_chamber,
    # E(MS chamber x cultivar(light)) = s2 + 3 s2_cc, E(MS residual) = s2.
    rows = [
        ("chamber(light)", [12, 0, 1]),
        ("chamber x cultivar(light)", [0, 3, 1]),
        ("residual", [0, 0, 1]),
    ]
    comps = moments(t, rows, ["chamber(light)", "chamber x cultivar(light)", "residual"])
    means = {
        "light": df.groupby("light")["mass"].mean().to_dict(),
        "cultivar": df.groupby("cultivar")["mass"].mean().to_dict(),
    }
    return {"layout": "problems/growth-chambers.toml", "data": "tests/fixtures/data/chambers-nested.csv", "terms": t, "planned": planned, "components": comps, "means": means, "grand_mean": float(df["mass"].mean())}


def batches():
    df = pd.read_csv(DATA / "batches-nested.csv")
    # The sample labels are unique across batches; number them within their batch so that
    # the nested term is coded at full rank (3 samples in each of 5 batches: 10 df).
    df["within"] = df.groupby("batch")["sample"].transform(lambda s: pd.factorize(s)[0])
    names = {"C(batch)": "batch", "C(batch):C(within)": "sample(batch)", "Residual": "residual"}
    t = anova(df, "purity ~ C(batch) + C(batch):C(within)", names)
    planned = {
        "batch": exact(t, "batch", "sample(batch)"),
        "sample(batch)": exact(t, "sample(batch)", "residual"),
    }
    # Two-stage nested random model (e.g. Montgomery, the two-stage nested design), 3 samples
    # per batch, 2 determinations: E(MS batch) = s2 + 2 s2_sample + 6 s2_batch,
    # E(MS sample(batch)) = s2 + 2 s2_sample.
    rows = [("batch", [6, 2, 1]), ("sample(batch)", [0, 2, 1]), ("residual", [0, 0, 1])]
    comps = moments(t, rows, ["batch", "sample(batch)", "residual"])
    return {"data": "tests/fixtures/data/batches-nested.csv", "terms": t, "planned": planned, "components": comps}


def quasi_f_null_rate():
    """The quasi-F of recipe in problems/coating-lines.toml under its null, by drawing the
    mean squares as independent scaled chi-squares. E(MS) at the planning values, restricted
    model, sigma = 2, s_rl = 0.8, s_rs = 0.6, s_rls = 0.5, n = 2, 4 lines, 3 shifts:
    E(rls) = 4 + 2(0.25) = 4.5; E(rl) = 4.5 + 6(0.64) = 8.34; E(rs) = 4.5 + 8(0.36) = 7.38;
    under the null E(recipe) = E(rl) + E(rs) - E(rls) = 11.22."""
    rng = np.random.default_rng(7)
    n = 400_000
    e = {"r": 11.22, "rl": 8.34, "rs": 7.38, "rls": 4.5}
    dfs = {"r": 1, "rl": 3, "rs": 2, "rls": 6}
    m = {k: e[k] * rng.chisquare(dfs[k], n) / dfs[k] for k in e}
    d = m["rl"] + m["rs"] - m["rls"]
    ok = d > 0
    safe = np.where(ok, d, 1.0)
    nu = safe ** 2 / (m["rl"] ** 2 / 3 + m["rs"] ** 2 / 2 + m["rls"] ** 2 / 6)
    p = np.where(ok, stats.f.sf(m["r"] / safe, 1, nu), 1.0)
    return {"draws": n, "alpha": 0.05, "null_rate": float((p < 0.05).mean()), "undefined": float(1 - ok.mean()), "mean_df": float(nu[ok].mean())}


def main():
    if "--write-fixtures" in sys.argv:
        write_fixtures()
    out = {
        "generated_by": "tests/reference/anova_reference.py",
        "versions": {"statsmodels": statsmodels.__version__, "scipy": scipy.__version__, "pandas": pd.__version__, "numpy": np.__version__},
        "anova_lm": "typ=1",
        "coating": coating(),
        "chambers": chambers(),
        "batches": batches(),
        "quasi_f_null": quasi_f_null_rate(),
    }
    path = ROOT / "tests" / "reference" / "anova_reference.json"
    path.write_text(json.dumps(out, indent=2, sort_keys=True) + "\n")
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
