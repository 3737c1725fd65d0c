"""The across-groups comparison as tidy tables and plain words: which groups respond differently.

`compare_across_groups` runs `model.pooled.compare_groups` with the run's thresholds (the p-value
adjustment across groups and its level); `comparison_tables` turns the result into a small table of
the tests over all groups and a long table of group × input differences, with flag words.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..checks.verdicts import adjust_pvalues
from ..job import Thresholds
from ..model.pooled import GroupComparison, OverallTest, compare_groups
from .headers import INPUT, INTERVAL_HIGH, INTERVAL_LOW, NO, P_VALUE, STD_ERROR, YES, cell_text
from .tables import empty_table, with_keys

# --- the long table: one row per compared group and input ------------------------------------------
GROUP_SLOPE = "slope in this group"
OTHERS_SLOPE = "slope of the others"
DIFFERENCE = "difference"
DEGREES_OF_FREEDOM = "degrees of freedom"
ADJUSTED_P = "adjusted p-value"
HOW_IT_DIFFERS = "how it differs"
IN_REFERENCE = "in the reference"
SLOPE_HEADERS = (INPUT, GROUP_SLOPE, OTHERS_SLOPE, DIFFERENCE, INTERVAL_LOW, INTERVAL_HIGH, STD_ERROR,
                 DEGREES_OF_FREEDOM, P_VALUE, ADJUSTED_P, HOW_IT_DIFFERS, IN_REFERENCE)

# --- the tests over all compared groups ------------------------------------------------------------
TEST, STATISTIC, DF_TESTED, DF_RESIDUAL, CONCLUSION = "test", "statistic", "df tested", "df residual", "what it says"
TEST_HEADERS = (TEST, STATISTIC, DF_TESTED, DF_RESIDUAL, P_VALUE, CONCLUSION)
EQUAL_SLOPES = "equal slopes (F): one slope per input shared by all groups, each group its own intercept"
ONE_LINE = "one common line (F): one intercept and one slope per input for all groups"
EQUAL_VARIANCES = "equal residual variances (Bartlett, chi-square)"

ADJUSTMENT_WORDS = {"bh": "Benjamini–Hochberg", "holm": "Holm", "none": "no adjustment"}
LISTED_LEFT_OUT = 20         # groups named in the left-out note; more are counted


@dataclass(frozen=True)
class ComparisonTables:
    """What the across-groups sheet shows. `reason` is '' when the groups were compared.

    tests   test, statistic, df tested, df residual, p-value, what it says (one row per test)
    slopes  group keys, then SLOPE_HEADERS: one row per compared group and input, inputs in term order
    notes   the lines to read before the tables: reference, assumption, std errors used, adjustment
    """

    tests: pd.DataFrame
    slopes: pd.DataFrame
    notes: tuple[str, ...]
    reason: str
    key_count: int
    inputs: tuple[str, ...]
    level: float
    flagged_groups: int


def compare_across_groups(y: np.ndarray, X: np.ndarray, codes: np.ndarray, fitted_ok: np.ndarray, *,
                          intercept: bool, thresholds: Thresholds, level: float,
                          weights: np.ndarray | None = None) -> GroupComparison:
    """`compare_groups` with the run's adjustment across groups and level of every verdict."""
    return compare_groups(y, X, codes, fitted_ok, intercept=intercept, weights=weights, level=level,
                          alpha=thresholds.alpha, adjust=lambda p: adjust_pvalues(p, thresholds.adjust))


def comparison_tables(comp: GroupComparison, keys: pd.DataFrame, inputs: Sequence[str],
                      thresholds: Thresholds) -> ComparisonTables:
    """The tables and notes of `comp`; `keys` holds the group key columns (one row per group code),
    `inputs` the labels of the slopes (the coefficient labels without the constant)."""
    inputs = tuple(str(s) for s in inputs)
    left = left_out_note(comp.left_out, keys)
    if not comp.compared:
        notes = (f"Not compared: {comp.reason}.",) + ((left,) if left else ())
        return ComparisonTables(pd.DataFrame(columns=list(TEST_HEADERS)), empty_table(keys, SLOPE_HEADERS),
                                notes, comp.reason, keys.shape[1], inputs, comp.level, 0)
    slopes, flagged = slopes_table(comp, keys, inputs, thresholds)
    notes = comparison_notes(comp, thresholds) + ((left,) if left else ())
    return ComparisonTables(tests_table(comp, thresholds.alpha), slopes, notes, "", keys.shape[1], inputs,
                            comp.level, flagged)


def slopes_table(comp: GroupComparison, keys: pd.DataFrame, inputs: Sequence[str],
                 thresholds: Thresholds) -> tuple[pd.DataFrame, int]:
    """The long table (inputs in term order, groups in code order) and how many groups it flags."""
    C, k = comp.slope.shape
    used = comp.used
    adjusted = np.column_stack([adjust_pvalues(used.pvalue[:, j], thresholds.adjust) for j in range(k)])
    with np.errstate(invalid="ignore"):
        flagged = adjusted < thresholds.alpha
    words = [[differs_words(comp.slope[g, j], comp.reference[g, j], inputs[j]) if flagged[g, j] else ""
              for g in range(C)] for j in range(k)]

    def by_input(a: np.ndarray) -> np.ndarray:
        return a.T.reshape(-1)

    body = {
        INPUT: np.repeat(np.array(inputs, dtype=object), C),
        GROUP_SLOPE: by_input(comp.slope),
        OTHERS_SLOPE: by_input(comp.reference),
        DIFFERENCE: by_input(comp.difference),
        INTERVAL_LOW: by_input(used.low),
        INTERVAL_HIGH: by_input(used.high),
        STD_ERROR: by_input(used.se),
        DEGREES_OF_FREEDOM: by_input(used.df),
        P_VALUE: by_input(used.pvalue),
        ADJUSTED_P: by_input(adjusted),
        HOW_IT_DIFFERS: np.array([w for per_input in words for w in per_input], dtype=object),
        IN_REFERENCE: np.tile(np.where(comp.in_reference, YES, NO).astype(object), k),
    }
    return with_keys(keys, np.tile(comp.codes, k), body), int(flagged.any(axis=1).sum())


def differs_words(slope: float, reference: float, label: str) -> str:
    """How a flagged group's slope differs from the others', in plain words."""
    if slope * reference < 0:
        return f"responds to {label} in the opposite direction to the other groups"
    if abs(slope) > abs(reference):
        return f"responds more strongly to {label} than the other groups"
    return f"responds more weakly to {label} than the other groups"


def tests_table(comp: GroupComparison, alpha: float) -> pd.DataFrame:
    """One row per test over all compared groups, each with its conclusion in words."""
    rows = [
        (EQUAL_SLOPES, comp.equal_slopes, "the slopes differ between groups",
         "no clear sign that the slopes differ between groups"),
        (ONE_LINE, comp.common_line, "the groups do not follow one common line",
         "no clear sign against one common line for all groups"),
        (EQUAL_VARIANCES, comp.equal_variances,
         "the residual variances differ: each group's own variance is used for the differences",
         "no clear sign that the residual variances differ: the common variance is used for the differences"),
    ]
    return pd.DataFrame([{TEST: name, STATISTIC: t.statistic, DF_TESTED: t.df1, DF_RESIDUAL: t.df2,
                          P_VALUE: t.pvalue, CONCLUSION: conclusion(t, alpha, yes, no)}
                         for name, t, yes, no in rows], columns=list(TEST_HEADERS))


def conclusion(test: OverallTest, alpha: float, rejected: str, kept: str) -> str:
    """`rejected` or `kept` with the p-value against `alpha`; a reason when there is no p-value."""
    p = test.pvalue
    if not np.isfinite(p):
        return "cannot be computed: the groups' own fits leave no residual variation"
    if p >= alpha:
        return f"{kept} (p = {p:.4f})"
    return f"{rejected} (p < 0.0001)" if p < 1e-4 else f"{rejected} (p = {p:.4f} < {alpha:g})"


def comparison_notes(comp: GroupComparison, thresholds: Thresholds) -> tuple[str, ...]:
    """The lines to read before the tables: reference, assumption and std errors used, adjustment, caution."""
    C = len(comp.codes)
    aside = C - int(comp.in_reference.sum())
    weighting = ("weighted by each group's precision (1 / its residual variance, so a noisy group barely moves "
                 "it)" if comp.own_used else "every group weighted alike")
    reference = ("Reference: each group's slope is compared with the common slope of the OTHER groups in the "
                 f"reference, fitted together with each group keeping its own intercept and {weighting}; a group "
                 "never pulls its own reference. ")
    were = "group of {} stands apart and was" if aside == 1 else "groups of {} stand apart and were"
    reference += (f"{aside} {were.format(C)} set aside from the reference, strongest first, so they do not drag "
                  "it (never half of the groups or more); a group set aside returns when it no longer stands "
                  f"apart from the groups that remain, so every group set aside is flagged; '{IN_REFERENCE}' "
                  "says which." if aside else "No group stands apart, so every other group is in each group's "
                  "reference.")
    p = comp.equal_variances.pvalue
    shown = "not computed" if not np.isfinite(p) else ("p < 0.0001" if p < 1e-4 else f"p = {p:.4f}")
    variant = ("each group's own residual variance (Welch-type std errors and degrees of freedom)" if comp.own_used
               else "the common residual variance of all compared groups")
    assumption = ("Assumption: the F-tests and the common-variance std errors assume one residual variance "
                  f"shared by all groups. Rule: when Bartlett's test of equal residual variances rejects at "
                  f"{comp.alpha:g}, each group's own variance is used instead. Here Bartlett's {shown}, so the "
                  f"differences use {variant}.")
    method = ADJUSTMENT_WORDS.get(thresholds.adjust, thresholds.adjust)
    caution = (f"Flags: p-values are adjusted across groups for each input ({method}); a group is flagged when "
               f"its adjusted p-value is below {thresholds.alpha:g}. Intervals at confidence level "
               f"{comp.level:g}. Testing many groups at once still raises false alarms: read a flag as "
               "\"look here\", not as proof.")
    notes = [reference, assumption, caution]
    if comp.weighted:
        notes.append("Weighted run: the groups are compared on the whitened rows √w·y and √w·X (weighted means "
                     "and weighted sums of squares).")
    return tuple(notes)


def left_out_note(left_out: np.ndarray, keys: pd.DataFrame) -> str:
    """'' when every group was compared, else the groups left out with why (the first few named)."""
    where = np.flatnonzero(left_out != "")
    if not len(where):
        return ""
    labels = group_labels(keys)
    named = [f"{labels[g]} ({left_out[g]})" for g in where[:LISTED_LEFT_OUT]]
    more = f"; and {len(where) - LISTED_LEFT_OUT:,} more" if len(where) > LISTED_LEFT_OUT else ""
    s = "" if len(where) == 1 else "s"
    return cell_text(f"Left out of the comparison: {len(where):,} group{s}: " + "; ".join(named) + more + ".")


def group_labels(keys: pd.DataFrame) -> list[str]:
    """Each group's name: its key values joined by ' / ' (blank keys shown empty)."""
    if keys.shape[1] == 0:
        return ["(all rows)"] * len(keys)
    parts = [keys.iloc[:, j].astype(object).where(keys.iloc[:, j].notna(), "").map(str) for j in range(keys.shape[1])]
    joined = parts[0]
    for part in parts[1:]:
        joined = joined + " / " + part
    return joined.tolist()


def across_groups(y: np.ndarray, X: np.ndarray, codes: np.ndarray, fitted_ok: np.ndarray, keys: pd.DataFrame,
                  labels: Sequence[str], *, intercept: bool, thresholds: Thresholds, level: float,
                  weights: np.ndarray | None = None) -> ComparisonTables | None:
    """The across-groups tables of a run whose groups share their terms (`labels`: the coefficient labels),
    or None when fewer than two groups were fitted."""
    if int(np.asarray(fitted_ok).sum()) < 2:
        return None
    comp = compare_across_groups(y, X, codes, fitted_ok, intercept=intercept, thresholds=thresholds, level=level,
                                 weights=weights)
    return comparison_tables(comp, keys, list(labels)[1 if intercept else 0:], thresholds)
