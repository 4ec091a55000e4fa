"""Reference values for emsplan's analysis of unbalanced data, from general-purpose libraries.

Run from the repository root:

    pip install statsmodels scipy pandas
    python3 tests/reference/unbalanced_reference.py

It (re)writes three fixture data sets in tests/fixtures/data/, each a balanced fixture of
anova_reference.py with observations taken out, and tests/reference/unbalanced_reference.json,
which is committed so that the Rust tests need no Python. For each fixture it holds:

- the sums of squares and df of every term and the residual. Sequential ones (terms in
  the order emsplan fits them: fixed terms first, fewer factors first) come from
  projections built here with numpy's pseudo-inverse, y'(P_k - P_(k-1))y with df the rank
  increase. statsmodels' anova_lm(typ=1) is not used for them: where a whole cell or unit
  is lost its design matrix is rank-deficient, and it then gives a term the df of its
  columns (6 for chamber(light) with 8 chambers in 3 light regimes, which have 5) and
  other sums of squares. Type III ones come from statsmodels' anova_lm(typ=3) with
  sum-to-zero coding of every factor, on a fixture with no cell empty (full rank), and
  the projections here are checked against them;
- the expected mean squares of those sums of squares by Hartley's (1967) synthesis,
  computed here independently of emsplan, at the level of the observations: with A the
  matrix of a sum of squares (a difference of projections built with numpy's pseudo-
  inverse), the coefficient of sigma^2_U in E(MS) is trace(A Z_U Z_U') / df, Z_U the 0/1
  incidence matrix of random term U (unrestricted model, e.g. Searle, Casella and
  McCulloch 1992, Variance Components);
- the variance components by the method of moments: the mean squares of the random terms
  and the residual set equal to those expectations, solved with numpy.linalg.solve;
- F over the residual and its p from scipy.stats.f.sf for the terms tested over the
  residual; raw means of the fixed main effects (pandas groupby).

The data are invented (see anova_reference.py); which observations are taken out is
written below.
"""

import json
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
    # Growth chambers: the third chamber under light2 lost, the third pot of
    # light1/chamber1/cultivar2 lost, and light3/chamber1/cultivar4 lost entirely.
    df = pd.read_csv(DATA / "chambers-nested.csv")
    pot = df.groupby(["light", "chamber", "cultivar"]).cumcount()
    drop = ((df.light == "light2") & (df.chamber == "chamber3")) \
        | ((df.light == "light1") & (df.chamber == "chamber1") & (df.cultivar == "cultivar2") & (pot == 2)) \
        | ((df.light == "light3") & (df.chamber == "chamber1") & (df.cultivar == "cultivar4"))
    df[~drop].to_csv(DATA / "chambers-lost.csv", index=False)

    # Coating: three panels lost, in three different cells (no cell empty).
    df = pd.read_csv(DATA / "coating-crossed.csv")
    panel = df.groupby(["recipe", "line", "shift"]).cumcount()
    drop = ((df.recipe == "recipe1") & (df.line == "line2") & (df["shift"] == "shift3") & (panel == 1)) \
        | ((df.recipe == "recipe2") & (df.line == "line1") & (df["shift"] == "shift1") & (panel == 0)) \
        | ((df.recipe == "recipe2") & (df.line == "line4") & (df["shift"] == "shift2") & (panel == 1))
    df[~drop].to_csv(DATA / "coating-lost.csv", index=False)

    # Purity: sample s5 (the second of batch2) lost, and one determination of s1 and of s13.
    df = pd.read_csv(DATA / "batches-nested.csv")
    det = df.groupby("sample").cumcount()
    drop = (df["sample"] == "s5") | ((df["sample"] == "s1") & (det == 1)) | ((df["sample"] == "s13") & (det == 0))
    df[~drop].to_csv(DATA / "batches-lost.csv", index=False)


def incidence(df, factors):
    keys = df[factors].astype(str).agg("|".join, axis=1)
    codes, _ = pd.factorize(keys)
    z = np.zeros((len(df), codes.max() + 1))
    z[np.arange(len(df)), codes] = 1.0
    return z


def projection(x):
    return x @ np.linalg.pinv(x)


def rank(x):
    return int(np.linalg.matrix_rank(x))


def synthesis(blocks, random, n):
    """Coefficients of E(MS) for every block (name -> matrix A) in the random components."""
    out = {}
    for name, a in blocks.items():
        df = round(np.trace(a))
        row = {u: float(np.trace(a @ z @ z.T) / df) for u, z in random.items()}
        row["residual"] = 1.0
        out[name] = row
    return out


def sequential(df, terms, response):
    """Sequential blocks P_k - P_(k-1) over the incidence matrices, terms in order."""
    n = len(df)
    x = np.ones((n, 1))
    p_before = projection(x)
    blocks = {}
    for name, factors in terms:
        x = np.hstack([x, incidence(df, factors)])
        p = projection(x)
        blocks[name] = p - p_before
        p_before = p
    blocks["residual"] = np.eye(n) - p_before
    return blocks


def deviation(df, factor):
    """Sum-to-zero coding: level i -> e_i, the last level -> all -1."""
    codes, _ = pd.factorize(df[factor], sort=True)
    k = codes.max() + 1
    c = np.vstack([np.eye(k - 1), -np.ones((1, k - 1))])
    return c[codes]


def type3(df, terms):
    """Type III blocks P_X - P_(X without T), every term sum-to-zero coded."""
    n = len(df)
    cols = {}
    for name, factors in terms:
        m = np.ones((n, 1))
        for f in factors:
            d = deviation(df, f)
            m = np.einsum("ij,ik->ijk", m, d).reshape(n, -1)
        cols[name] = m
    full = np.hstack([np.ones((n, 1))] + list(cols.values()))
    p_full = projection(full)
    blocks = {}
    for name in cols:
        rest = np.hstack([np.ones((n, 1))] + [c for k, c in cols.items() if k != name])
        blocks[name] = p_full - projection(rest)
    blocks["residual"] = np.eye(n) - p_full
    return blocks


def case(csv, response, terms, random_terms, typ, formula=None, names=None):
    df = pd.read_csv(DATA / csv)
    blocks = sequential(df, terms, response) if typ == 1 else type3(df, terms)
    y = df[response].to_numpy()
    sums = {name: {"ss": float(y @ a @ y), "df": float(round(np.trace(a)))} for name, a in blocks.items()}
    source = "numpy projections (pinv)"
    if formula is not None:
        # Full rank: statsmodels' table is the reference, and the projections must agree.
        table = anova_lm(smf.ols(formula, data=df).fit(), typ=typ)
        sums = {}
        for key, name in names.items():
            row = table.loc[key]
            sums[name] = {"ss": float(row["sum_sq"]), "df": float(row["df"])}
        for name, a in blocks.items():
            assert abs(y @ a @ y - sums[name]["ss"]) < 1e-8 * max(1.0, sums[name]["ss"]), name
            assert round(np.trace(a)) == round(sums[name]["df"]), name
        source = f"statsmodels anova_lm(typ={typ})"
    random = {name: incidence(df, factors) for name, factors in terms if name in random_terms}
    ems = synthesis(blocks, random, len(df))
    ms = {name: sums[name]["ss"] / sums[name]["df"] for name in sums}
    unknowns = list(random_terms) + ["residual"]
    a = np.array([[ems[t][u] for u in unknowns] for t in unknowns])
    b = np.array([ms[t] for t in unknowns])
    components = dict(zip(unknowns, map(float, np.linalg.solve(a, b))))
    over_residual = {}
    for name in sums:
        if name == "residual":
            continue
        f = ms[name] / ms["residual"]
        over_residual[name] = {"f": f, "p": float(stats.f.sf(f, sums[name]["df"], sums["residual"]["df"]))}
    return {"data": f"tests/fixtures/data/{csv}", "observations": len(df), "sums_of_squares": "sequential" if typ == 1 else "type3", "source": source, "terms": sums, "ems": ems, "components": components, "over_residual": over_residual, "grand_mean": float(y.mean())}


def main():
    write_fixtures()
    chambers = case(
        "chambers-lost.csv", "mass",
        [("light", ["light"]), ("cultivar", ["cultivar"]), ("light x cultivar", ["light", "cultivar"]),
         ("chamber(light)", ["light", "chamber"]), ("chamber x cultivar(light)", ["light", "chamber", "cultivar"])],
        ["chamber(light)", "chamber x cultivar(light)"], 1,
    )
    df = pd.read_csv(DATA / "chambers-lost.csv")
    chambers["means"] = {"light": df.groupby("light")["mass"].mean().to_dict(), "cultivar": df.groupby("cultivar")["mass"].mean().to_dict()}
    coating = case(
        "coating-lost.csv", "thickness",
        [("recipe", ["recipe"]), ("line", ["line"]), ("shift", ["shift"]), ("recipe x line", ["recipe", "line"]),
         ("recipe x shift", ["recipe", "shift"]), ("line x shift", ["line", "shift"]), ("recipe x line x shift", ["recipe", "line", "shift"])],
        ["line", "shift", "recipe x line", "recipe x shift", "line x shift", "recipe x line x shift"], 3,
        "thickness ~ C(recipe, Sum) * C(line, Sum) * C(shift, Sum)",
        {"C(recipe, Sum)": "recipe", "C(line, Sum)": "line", "C(shift, Sum)": "shift",
         "C(recipe, Sum):C(line, Sum)": "recipe x line", "C(recipe, Sum):C(shift, Sum)": "recipe x shift",
         "C(line, Sum):C(shift, Sum)": "line x shift", "C(recipe, Sum):C(line, Sum):C(shift, Sum)": "recipe x line x shift", "Residual": "residual"},
    )
    batches = case(
        "batches-lost.csv", "purity",
        [("batch", ["batch"]), ("sample(batch)", ["batch", "sample"])],
        ["batch", "sample(batch)"], 1,
    )
    out = {
        "generated_by": "tests/reference/unbalanced_reference.py",
        "versions": {"statsmodels": statsmodels.__version__, "scipy": scipy.__version__, "pandas": pd.__version__, "numpy": np.__version__},
        "chambers": chambers,
        "coating": coating,
        "batches": batches,
    }
    path = ROOT / "tests" / "reference" / "unbalanced_reference.json"
    path.write_text(json.dumps(out, indent=2, sort_keys=True) + "\n")
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
