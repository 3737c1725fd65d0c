"""The `previous` dimension of the combination matrix (tests/test_combinations.py): a case with previous=True
is fitted twice. First an earlier run, always through the API, on an independently seeded table of the same
shape (earlier_table: group S01's kWh and Gas slopes in CDD shifted, S02 showing other levels of a category,
the last group renamed so that one group is gone and one is new); then the case's own run with previous= that results workbook (or
`--previous` on the CLI route). Its `since previous run` and `coefficient changes` tables are compared with
the oracle below.

Oracle, per group fitted in both runs (README "What changed since the previous run"): statsmodels OLS of
each run's rows (WLS with each run's own weights divided by their group's mean, as the group references of
tests/combination_oracle.py fit them) and of both runs' rows pooled (each row keeping its own run's scaled
weight and its own run's design, change-point columns at that run's change points):
    Chow F = ((RSS_pooled − RSS₁ − RSS₂)/k) / ((RSS₁ + RSS₂)/(n₁ + n₂ − 2k))     (Chow 1960),
p from scipy's F law, adjusted across groups by Benjamini–Hochberg (statsmodels multipletests; README: the
run's --adjust, default bh); each coefficient's change b₂ − b₁ with std error √(s²·[A₁⁻¹ + A₂⁻¹]_jj),
A⁻¹ statsmodels' normalized_cov_params, s² = (RSS₁ + RSS₂)/(n₁ + n₂ − 2k), and an interval with scipy's t
on n₁ + n₂ − 2k df. A group whose coefficients differ from the run's slots in either run (a category level
it lacks, a different change-point shape) is not tested (README), with a note saying so.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.multitest import multipletests

import sheetfit
from tests.combination_cases import (
    CHANGE_TABLES,
    Key,
    key_of,
    make_table,
    num,
    of_group,
    text,
)
from tests.combination_oracle import ALPHA, GroupReference, close
from tests.combinations import DATA_REFERENCE, GAS, GROUP, LEVELS, Case, Y

EARLIER = "-earlier"               # suffix of the earlier run's inputs (xls_inputs) and folder
EARLIER_SEED = 7919                # added to the case's seed for the earlier table
SHIFT_GROUP = "S01"                # the group whose slope in CDD changed since the earlier run
SLOPE_SHIFT = {Y: 1.5, GAS: 1.2}   # the change of each response's slope in CDD
GONE_NAME = "S00"                  # the earlier run's name of the last group (gone; its new name is new)
LEVEL_GROUP = "S02"                # shows other levels of each category in the earlier run (not tested)
LEVEL = 0.95                       # README: the default --level
# README: the words of `what changed`
CHANGED, UNCHANGED, NEWLY, NO_LONGER, NEW, GONE = ("relation changed", "no change found", "newly flagged",
                                                   "no longer flagged", "new group", "gone")


def earlier_table(case: Case) -> pd.DataFrame:
    """The earlier run's rows: the case's table seeded apart, S01's slopes in CDD shifted (SLOPE_SHIFT), S02's
    category cells at the last level set to the first other level (still two levels, but other coefficients
    than in this run) and with several groups the last one named GONE_NAME."""
    table = make_table(case, seed=case.seed + EARLIER_SEED)
    at = (table[GROUP] == SHIFT_GROUP).to_numpy()
    cdd = pd.to_numeric(table["CDD"]).to_numpy(float)
    for column, shift in SLOPE_SHIFT.items():
        table.loc[at, column] = table.loc[at, column] + shift * cdd[at]
    for column in case.categories:
        last = (table[GROUP] == LEVEL_GROUP) & (table[column] == LEVELS[column][-1])
        table.loc[last, column] = next(v for v in LEVELS[column] if v != DATA_REFERENCE[column])
    if len(case.group_sizes()) > 1:
        table[GROUP] = table[GROUP].replace(f"S{len(case.group_sizes()):02d}", GONE_NAME)
    return table


def run_earlier(case: Case, sources: list[Path], out: Path) -> pd.DataFrame:
    """The earlier run through the API with the case's settings, its results written to `out`; its groups."""
    res = sheetfit.fit_workbook(sources[0] if case.files == 1 else sources, **case.settings())
    sheetfit.write_results(res, out)
    return res.groups


def _flags(case: Case, groups: pd.DataFrame) -> dict[Key, float]:
    """Each group's number of flags as its run's groups table says."""
    return {key_of(case, r): num([r["flags"]])[0] for _, r in groups.iterrows()}


def chow(old: GroupReference, new: GroupReference) -> dict:
    """The Chow test and coefficient changes of one group from statsmodels fits of each run and of both pooled
    (change points taken as known, each run's own, and counted in the residual df as every check counts them)."""
    k, n1, n2 = old.k, len(old.rows), len(new.rows)
    rss1, rss2 = old.fit.ssr, new.fit.ssr
    pooled = sm.WLS(np.r_[old.y, new.y], np.vstack([old.X, new.X]), weights=np.r_[old.w, new.w]).fit()
    df2 = n1 + n2 - 2 * k - old.c - new.c
    s2 = (rss1 + rss2) / df2 if df2 > 0 else np.nan
    F = ((pooled.ssr - rss1 - rss2) / k) / s2
    change = np.asarray(new.fit.params) - np.asarray(old.fit.params)
    se = np.sqrt(s2 * np.diag(old.fit.normalized_cov_params + new.fit.normalized_cov_params))
    t = stats.t.ppf(0.5 + LEVEL / 2, df2) if df2 > 0 else np.nan
    return {"F": F, "df1": float(k), "df2": float(df2), "p": stats.f.sf(F, k, df2) if df2 > 0 else np.nan,
            "change": change, "se": se, "low": change - t * se, "high": change + t * se}


def expected_changes(old_refs: list[GroupReference], new_refs: list[GroupReference], slots: dict | None) -> dict:
    """Per group key of either run: its earlier and current reference, and where both exist with the same
    coefficients (README; with `slots`, key → the coefficients sheetfit lists for it, only where they are all
    of them) the Chow test; p adjusted by Benjamini–Hochberg over the tested groups (statsmodels multipletests)."""
    old, new = {r.key: r for r in old_refs}, {r.key: r for r in new_refs}
    out = {}
    for key in dict.fromkeys([*old, *new]):
        o, n = old.get(key), new.get(key)
        tested = o is not None and n is not None and o.labels == n.labels
        tested = tested and (slots is None or o.labels == slots.get(key))
        out[key] = {"old": o, "new": n, "test": chow(o, n) if tested else None}
    p = np.array([e["test"]["p"] if e["test"] else np.nan for e in out.values()])
    ok = np.isfinite(p)
    adjusted = np.full(len(p), np.nan)
    if ok.any():
        adjusted[ok] = multipletests(p[ok], method="fdr_bh")[1]
    for e, a in zip(out.values(), adjusted):
        e["adjusted"] = a
    return out


def _words(e: dict, before: float, now: float) -> str:
    """README: what changed, in words, from the adjusted p-value and the flags of both runs."""
    if e["old"] is None or e["new"] is None:
        return NEW if e["old"] is None else GONE
    words = [CHANGED] if e["adjusted"] < ALPHA else []
    words += [NEWLY] if before == 0 and now > 0 else [NO_LONGER] if before > 0 and now == 0 else []
    return "; ".join(words) or UNCHANGED


def compare_group_changes(case: Case, want: dict, table: pd.DataFrame, flags: tuple[dict, dict]) -> None:
    """The `since previous run` table: one row per group of either run, its words, test, flags and rows."""
    assert {key_of(case, r) for _, r in table.iterrows()} == set(want), "groups on since previous run"
    for key, e in want.items():
        row = of_group(table, key).iloc[0]
        label = ", ".join(f"{c} {v}" for c, v in key) or "the group"
        before, now = flags[0].get(key, np.nan), flags[1].get(key, np.nan)
        assert text(row["what changed"]) == _words(e, before, now), f"{label}: what changed {row['what changed']!r}"
        close(num([row["flags before"], row["flags now"]]), [before, now], f"{label} flags", 1)
        rows = [np.nan if r is None else len(r.rows) for r in (e["old"], e["new"])]
        close(num([row["rows before"], row["rows now"]]), rows, f"{label} rows", 1)
        test, note = e["test"], text(row["note"])
        if test is None:
            assert e["old"] is None or e["new"] is None or note.startswith("not tested"), f"{label}: note {note!r}"
            assert np.isnan(num([row["Chow F"], row["p-value"], row["adjusted p-value"]])).all(), label
            continue
        assert note == "", f"{label}: note {note!r} on a tested group"
        got = num([row[c] for c in ("Chow F", "df (coefficients)", "df (residual)", "p-value", "adjusted p-value")])
        close(got, [test["F"], test["df1"], test["df2"], test["p"], e["adjusted"]], f"{label} Chow test", 1)


def compare_coefficient_changes(case: Case, want: dict, table: pd.DataFrame) -> None:
    """The `coefficient changes` table: each coefficient of a group fitted in both runs, before, now and the
    change; for a tested group its std error and interval too."""
    both = [key for key, e in want.items() if e["old"] is not None and e["new"] is not None]
    assert {key_of(case, r) for _, r in table.iterrows()} == set(both), "groups on coefficient changes"
    for key in both:
        e, rows = want[key], of_group(table, key)
        label = ", ".join(f"{c} {v}" for c, v in key) or "the group"
        at = {text(c): i for i, c in enumerate(rows["coefficient"])}
        for ref, column in ((e["old"], "before"), (e["new"], "now")):
            i = [at[name] for name in ref.labels]
            close(num(rows[column].iloc[i]), ref.fit.params, f"{label} {column}", ref.fit.bse)
        test = e["test"]
        if test is None:
            continue
        i = [at[name] for name in e["new"].labels]
        scale = test["se"]
        for column, value in (("change", test["change"]), ("std error of change", test["se"]),
                              ("change low", test["low"]), ("change high", test["high"])):
            close(num(rows[column].iloc[i]), value, f"{label} {column}", scale)


def compare_changes(case: Case, old_refs: list[GroupReference], new_refs: list[GroupReference],
                    tables: dict, old_groups: pd.DataFrame, every_slot: bool = False) -> None:
    """Both tables of what changed against the oracle (the module's docstring). `every_slot`: test only the
    groups that use every coefficient slot sheetfit lists (what sheetfit does; the README's test takes every
    group with the same coefficients in both runs)."""
    groups, coefficients = (tables[name] for name in CHANGE_TABLES)
    assert groups is not None and coefficients is not None, "no tables of what changed with --previous"
    slots = {key_of(case, r): [] for _, r in coefficients.iterrows()}
    for _, r in coefficients.iterrows():
        slots[key_of(case, r)].append(text(r["coefficient"]))
    assert len({tuple(s) for s in slots.values()}) <= 1, "groups with different coefficient lists"
    want = expected_changes(old_refs, new_refs, slots if every_slot else None)
    compare_group_changes(case, want, groups, (_flags(case, old_groups), _flags(case, tables["groups"])))
    compare_coefficient_changes(case, want, coefficients)
