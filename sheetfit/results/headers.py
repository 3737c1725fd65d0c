"""The user's columns beside ours: one rule for every table, sheet and the model store.

Every keyed result table starts with the group key columns, in `FitResults.group_columns` order,
so code finds them by position, never by name. A user's column (group key, response, input or
order column) keeps its own name as header unless that name is also the header of one of our
columns in the same table; then it is shown as `NAME (input)` (`NAME (input 2)`… should that be
taken too). Our columns always keep their names, so `groups["status"]` is always sheetfit's status.

Text in a cell holds at most CELL_LIMIT UTF-16 units (the spreadsheet limit); `cell_text` cuts
longer text and ends it with CUT_MARK so the cut shows.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

# --- our headers, one place for the writer, the readers of results and the tests -------------------
# `groups`: which checks failed, how good the fit is, how large the error is, sizes, then the rest.
STATUS, FLAGS, REASONS = "status", "flags", "reasons"
R2, ADJUSTED_R2, F_STAT, F_P_VALUE = "R²", "adjusted R²", "F", "F p-value"
RESIDUAL_STD_ERROR, RMSE, CV_RMSE = "residual std error", "RMSE", "CV(RMSE) %"
ROWS_USED, ROWS_NOT_USED, COEFFICIENT_COUNT = "rows used", "rows not used", "number of coefficients"
AIC, BIC = "AIC", "BIC"
HIGH_LEVERAGE_ROWS, OUTLYING_ROWS, INFLUENTIAL_ROWS = "high-leverage rows", "outlying rows", "influential rows"
CONDITION_NUMBER = "condition number"
GROUP_HEADERS = (STATUS, FLAGS, REASONS, R2, ADJUSTED_R2, F_STAT, F_P_VALUE, RESIDUAL_STD_ERROR, RMSE, CV_RMSE,
                 ROWS_USED, ROWS_NOT_USED, COEFFICIENT_COUNT, AIC, BIC)
GROUP_EXTRA_HEADERS = (HIGH_LEVERAGE_ROWS, OUTLYING_ROWS, INFLUENTIAL_ROWS, CONDITION_NUMBER)

# `coefficients`: the coefficient and its interval first, then how sure we are of it.
INPUT, COEFFICIENT = "input", "coefficient"
INTERVAL_LOW, INTERVAL_HIGH = "interval low", "interval high"
STD_ERROR, T_STAT, P_VALUE = "std error", "t", "p-value"
COEFFICIENT_HEADERS = (INPUT, COEFFICIENT, INTERVAL_LOW, INTERVAL_HIGH, STD_ERROR, T_STAT, P_VALUE)

# `observations` (after the source and the user's columns): use, then what is unusual, then the fit.
USED, ROW_FLAGS = "used in fit", "row flags"
FITTED, RESIDUAL, STUDENTIZED, LEVERAGE, COOKS = ("fitted value", "residual", "studentized residual", "leverage",
                                                  "Cook's distance")
YES, NO = "yes", "no"
WEIGHT_USED = "weight as fitted"        # a weighted fit's row weight, scaled to average 1 in its group
# the words in `row flags`: a row is shaded when one of LOOK_HERE is among them; the other two are softer
# signals that a few rows of most healthy fits carry, listed but not shaded
LEVERAGE_ONE_FLAG, OUTLYING_FLAG, MOVES_FIT_FLAG = "leverage 1", "outlying", "moves the fit"
HIGH_LEVERAGE_FLAG, INFLUENTIAL_FLAG = "high leverage", "influential"
LOOK_HERE = (LEVERAGE_ONE_FLAG, OUTLYING_FLAG, MOVES_FIT_FLAG)
FLAG_SEPARATOR = "; "
# a date/time column of the user's shows its dates; the days the model used stand beside it under this mark
DAYS_MARK = "days from group start"

# predictions (`sheetfit predict`, `sheetfit.predict`, the live prediction sheet) and the chart curves
PREDICTED = "predicted value"
MEAN_STD_ERROR = "std error of the fitted mean"
NEW_ROW_STD_ERROR = "std error for one new row"
AVERAGE_LOW, AVERAGE_HIGH = "range for the average, low", "range for the average, high"
NEW_ROW_LOW, NEW_ROW_HIGH = "range for one new row, low", "range for one new row, high"
EXTRAPOLATION = "extrapolation"
PREDICTION_REASON = "reason"          # the same word as the reason of an unusable row on `observations`
PREDICTION_HEADERS = (PREDICTED, MEAN_STD_ERROR, AVERAGE_LOW, AVERAGE_HIGH, NEW_ROW_LOW, NEW_ROW_HIGH,
                      EXTRAPOLATION, PREDICTION_REASON)

INPUT_MARK = "input"
CELL_LIMIT = 32_767        # UTF-16 units a spreadsheet cell holds
CUT_MARK = "…"


def shown_names(user: Sequence[str], ours: Iterable[str]) -> list[str]:
    """The headers of the user's columns `user` in a table that also holds our columns `ours`."""
    ours = set(map(str, ours))
    taken = ours | {str(u) for u in user}
    out = []
    for name in map(str, user):
        if name in ours:
            k = 1
            shown = f"{name} ({INPUT_MARK})"
            while shown in taken:
                k += 1
                shown = f"{name} ({INPUT_MARK} {k})"
            taken.add(shown)
            name = shown
        out.append(name)
    return out


def renamed(user: Sequence[str], shown: Sequence[str]) -> list[tuple[str, str]]:
    """(name, header) of the user's columns whose header differs from their name."""
    return [(str(u), s) for u, s in zip(user, shown) if str(u) != s]


def rename_note(pairs: Sequence[tuple[str, str]]) -> str:
    """The `about` line for user columns shown under another header."""
    listed = ", ".join(f'"{u}" as "{s}"' for u, s in pairs)
    return f"input columns shown under another header, because a column of sheetfit's own has their name: {listed}"


def utf16_len(text: str) -> int:
    """Length in UTF-16 units, as spreadsheets count (characters beyond U+FFFF count twice)."""
    if len(text) * 2 <= CELL_LIMIT:          # cannot pass the limit: skip the encoding
        return len(text)
    return len(text.encode("utf-16-le", "surrogatepass")) // 2


def cell_text(text: str, limit: int = CELL_LIMIT) -> str:
    """`text` if a cell holds it, else cut to `limit` UTF-16 units ending in CUT_MARK (linear time)."""
    if len(text) <= limit // 2 or utf16_len(text) <= limit:
        return text
    units = text.encode("utf-16-le", "surrogatepass")[: 2 * (limit - len(CUT_MARK))]
    return units.decode("utf-16-le", "ignore") + CUT_MARK
