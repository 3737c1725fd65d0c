"""The `about` sheet: provenance and settings, notes on what was written, legend, definitions, cautions."""

from __future__ import annotations

import datetime as _dt
import math
from typing import Any

from ..model.row_measures import LEVERAGE_ONE_TOL
from ..results.headers import (COEFFICIENT, COEFFICIENT_COUNT, DAYS_MARK, FITTED, HIGH_LEVERAGE_FLAG,
    INFLUENTIAL_FLAG, INTERVAL_HIGH, INTERVAL_LOW, LEVERAGE_ONE_FLAG, LOOK_HERE, MOVES_FIT_FLAG, OUTLYING_FLAG,
    ROW_FLAGS, ROWS_USED, cell_text)
from ..terms import INTERCEPT
from .book import WriteContext
from .styles import CHART_LEGEND, HIGHLIGHTS

VALUE_WIDTH = 110   # characters

DEFINITIONS: tuple[tuple[str, str], ...] = (
    ("p", f"{COEFFICIENT_COUNT}: estimated coefficients (the {INTERCEPT} counts when fitted)"),
    ("n", f"{ROWS_USED}: observations used in the group's fit"),
    (INTERCEPT, "the intercept: the fitted value when every input term is 0"),
    ("RSS", "residual sum of squares: Σ residual²"),
    ("RMSE", "√(RSS / n)"),
    ("residual std error", "√(RSS / (n − p))"),
    ("CV(RMSE) %", "100 · residual std error / mean(y)"),
    ("R²", "1 − RSS / Σ(y − mean y)²; without an intercept: 1 − RSS / Σy²"),
    ("adjusted R²", "1 − (1 − R²) · (n − k) / (n − p), k = 1 with an intercept, 0 without"),
    ("F", "(explained sum of squares / (p − k)) / (RSS / (n − p)); F p-value from the F(p − k, n − p) "
          "distribution"),
    ("AIC", "−2 log L + 2p, with the Gaussian log-likelihood log L = −n/2 · (ln(2π · RSS/n) + 1)"),
    ("BIC", "−2 log L + p · ln n"),
    ("t", f"{COEFFICIENT} / std error; p-value two-sided from the t distribution with n − p degrees of freedom"),
    (f"{INTERVAL_LOW}, {INTERVAL_HIGH}", f"{COEFFICIENT} ∓ t quantile · std error: the confidence interval of "
                                         "the coefficient at the chosen confidence level (setting level)"),
    (FITTED, "Σ coefficient × term value at the row's inputs"),
    ("leverage", "diagonal of the hat matrix X(X'X)⁻¹X'"),
    ("studentized residual", "residual divided by its standard error with the row left out (externally "
                             "studentized)"),
    ("Cook's distance", "residual² · leverage / (p · residual std error² · (1 − leverage)²)"),
    ("adjusted p-value", "p-value adjusted across groups for the same check (see setting adjust)"),
)


def row_flag_definitions(thr: Any) -> tuple[tuple[str, str], ...]:
    """What each word in `row flags` means at this run's thresholds, and the day counts beside dates."""
    return (
        (ROW_FLAGS, "words naming what is unusual about a row used in the fit; "
                    + ", ".join(f'"{w}"' for w in LOOK_HERE[:-1]) + f' and "{LOOK_HERE[-1]}" shade the row (look '
                    f'at it); "{HIGH_LEVERAGE_FLAG}" and "{INFLUENTIAL_FLAG}" are softer signals that a few rows '
                    "of most healthy fits carry: listed, not shaded"),
        (LEVERAGE_ONE_FLAG, f"leverage 1 (to within {LEVERAGE_ONE_TOL:g}): the row alone fixes a coefficient, "
                            "its residual is 0 and nothing checks it; shaded"),
        (OUTLYING_FLAG, f"|studentized residual| > {thr.studentized_cutoff:g} (setting studentized cutoff); shaded"),
        (MOVES_FIT_FLAG, "Cook's distance above the median of F(p, n − p): the row behind the group's failed "
                         "influence check; shaded"),
        (HIGH_LEVERAGE_FLAG, f"leverage > {thr.leverage_factor:g} · p / n (common practice; setting leverage "
                             "factor); not shaded"),
        (INFLUENTIAL_FLAG, f"Cook's distance > {thr.cooks_factor:g} / n (common practice; setting cooks factor); "
                           "not shaded"),
        (f"NAME ({DAYS_MARK})", "beside a column that holds dates or times: days since the group's earliest "
                                "date, the number the model uses; the column before it shows the dates as read"),
    )


def change_point_definitions(res: Any) -> tuple[tuple[str, str], ...]:
    """The change-point terms and columns of a change-point run, the calibration columns of a calibration
    run, and the baseline criteria when judged."""
    rows: list[tuple[str, str]] = []
    if res.change_points is not None:
        rows += [
            ("T below change point", "the term max(0, τ − T) of the temperature input T with the group's change "
                                     "point τ: its coefficient is the change in y per degree below τ"),
            ("T above change point", "the term max(0, T − τ): its coefficient is the change in y per degree above τ "
                                     "(for heating-cooling, τ is the upper change point)"),
            ("change points", "estimated by exact least squares over the observed temperatures with at least 3 "
                              "rows on each side (common practice); counted as parameters: p = k coefficients + "
                              "c change points in n − p, CV(RMSE), AIC and BIC; coefficient intervals treat τ as "
                              "known"),
            ("change point low, high", "profile interval: every τ with RSS(τ) ≤ RSS_min · (1 + F(1, n − p; level) "
                                       "/ (n − p))"),
            ("shape", "setting change point; with auto, per group the straight line or the shape with the lowest "
                      "BIC = n · ln(RSS/n) + p · ln n among shapes whose change points lie inside the range and "
                      "whose slopes have the expected sign and differ from zero at alpha (common practice); "
                      "'why this shape' gives each shape's BIC and why others were left out"),
        ]
    if res.job.calibration:
        thr = res.job.thresholds
        rows += [
            ("limit of detection", "3.3 · residual std error / |slope| (ICH Q2, based on the calibration line)"),
            ("limit of quantification", "10 · residual std error / |slope| (ICH Q2, based on the calibration line)"),
            ("back-calculated input", "(response − constant) / slope: the standard's value read back from its own "
                                      "response"),
            ("deviation %", "100 · (back-calculated input − input) / input; empty for the blank (input 0)"),
            ("standard off", f"the deviation is beyond ±{thr.back_calc_limit:g} % (±{thr.back_calc_limit_lowest:g} % "
                             "at the group's lowest non-zero standard): common practice in method validation "
                             "(settings back calc limit, back calc limit lowest); shaded"),
        ]
    if res.job.judge_baseline:
        thr = res.job.thresholds
        rows += [
            ("NMBE %", "normalised mean bias error: 100 · Σ(y − fitted) / ((n − p) · mean(y)); zero up to rounding "
                       "with a constant in the model"),
            ("baseline criteria", f"CV(RMSE) at most {thr.max_cv_rmse:g} %, |NMBE| at most {thr.max_nmbe:g} %, R² at "
                                  f"least {thr.baseline_min_r2:g}: common practice for monthly energy baselines; a "
                                  "measurement-and-verification plan may set others"),
        ]
    return tuple(rows)


ADJUST_WORDS = {
    "bh": "Benjamini–Hochberg false discovery rate across groups, per check",
    "holm": "Holm's step-down family-wise error rate across groups, per check",
    "none": "none — every p-value is judged on its own, so expect more false alarms",
}


def cautions(adjust: str, baseline: bool = False) -> tuple[tuple[str, str], ...]:
    """The cautions on `about`; `baseline` adds the one for energy baselines."""
    return (
        ("association", "A fit shows association in these rows, not cause and effect."),
        ("range", "Do not extrapolate: a fit describes y only within the observed range of its inputs."),
        ("many groups", "Testing many groups at once produces false alarms by chance; adjustment used: "
                        + ADJUST_WORDS.get(adjust, adjust) + "."),
        ("rules of thumb", "Cut-offs such as R² below a minimum or rows per coefficient are common practice, "
                           "not laws; judge flagged groups in context."),
        ("regulated work", "Where results feed regulated or safety-relevant work, such as laboratory "
                           "calibration or contractual savings claims, defer to the applicable standard, "
                           "local codes and licensed practice."),
    ) + ((("energy baselines", "A baseline supports, never replaces, the measurement-and-verification plan, "
                               "the applicable protocol or contract and licensed professional judgement."),)
         if baseline else ())


def about_sheet(ctx: WriteContext) -> None:
    """Create the sheet now (so it sits after the charts); write it last, when all notes are in."""
    ws = ctx.add_sheet("about")
    ctx.at_end(lambda: _write_about(ctx, ws))


def _cell(value: Any) -> tuple[Any, bool]:
    """A value as one cell; (cell, blanked) where blanked says a non-finite number was dropped."""
    if value is None:
        return "", False
    if isinstance(value, bool):
        return ("yes" if value else "no"), False
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        f = float(value)
        return (value, False) if math.isfinite(f) else (None, True)
    if isinstance(value, _dt.datetime):
        return value.isoformat(sep=" ", timespec="seconds"), False
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):
        try:
            return _cell(value.item())
        except (TypeError, ValueError):
            pass
    if isinstance(value, (tuple, list)):
        return cell_text(", ".join(str(v) for v in value) or "(none)"), False
    return cell_text(str(value)), False


def _write_about(ctx: WriteContext, ws) -> None:
    st = ctx.styles
    res = ctx.results
    ws.set_column(0, 0, 30, st.text)
    ws.set_column(1, 1, VALUE_WIDTH, st.wrap)
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    rows: list[tuple[str, Any, Any]] = []   # (item, value, item format)
    blanked: list[str] = []

    def section(title: str) -> None:
        rows.append(("", "", None))
        rows.append((title, "", st.section))

    for item, value in res.about:
        cell, dropped = _cell(value)
        if dropped:
            blanked.append(str(item))
        rows.append((str(item), cell, None))
    if blanked:
        ctx.note("about", "non-finite values left empty: " + ", ".join(blanked))

    section("what this workbook holds")
    for item, text in ctx.notes:
        rows.append((f"{item} sheet", text, None))

    section("colour legend")
    for h in HIGHLIGHTS:
        rows.append((h.colour_name, h.meaning, st.sample[h.key]))
    for name, meaning in CHART_LEGEND:
        rows.append((name, meaning, None))

    section("definitions")
    rows.extend((k, v, None) for k, v in DEFINITIONS)
    rows.extend((k, v, None) for k, v in row_flag_definitions(res.job.thresholds))
    rows.extend((k, v, None) for k, v in change_point_definitions(res))

    section("cautions")
    rows.extend((k, v, None) for k, v in cautions(res.job.thresholds.adjust, res.job.judge_baseline))

    ws.write_row(0, 0, ["item", "value"], st.header)
    for r, (item, value, fmt) in enumerate(rows, start=1):
        item, value = cell_text(item), cell_text(value) if isinstance(value, str) else value
        if fmt is not None:
            ws.write_string(r, 0, item, fmt)
        elif item:
            ws.write_string(r, 0, item)
        if value is None or value == "":
            continue
        if isinstance(value, str):
            lines = sum(max(1, math.ceil(len(part) / (1.15 * VALUE_WIDTH))) for part in value.split("\n"))
            if lines > 1:     # wrapped text needs a taller row; viewers do not all resize rows
                ws.set_row(r, 15 * min(lines, 20))
            ws.write_string(r, 1, value)
        else:
            ws.write_number(r, 1, value)
    ws.freeze_panes(1, 0)
