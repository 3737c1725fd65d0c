"""Several responses in one run: the rows once per response, the response's name as the first group key.

Every later stage then works as for one response: each (response, group) pair is fitted, checked and
written like any group, every results sheet carries the response key first, and the explorer, the
charts and the live prediction sheet offer the response with the group. A row's reasons are its own
per response: a blank in one response column leaves the row usable for the others.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence

import pandas as pd

from .tidy import REASON, Observations

RESPONSE_KEY = "response"
RESPONSE_VALUE = "response value"


def free_name(base: str, taken: Sequence[str]) -> str:
    """`base`, or `base 2`, `base 3`… when a column already has that name."""
    name, k = base, 1
    while name in taken:
        k += 1
        name = f"{base} {k}"
    return name


def stack_responses(obs: Observations, responses: Sequence[str]) -> Observations:
    """The observations once per response (one response: unchanged)."""
    responses = list(dict.fromkeys(responses))
    if len(responses) <= 1:
        return obs
    data = obs.data
    taken = [str(c) for c in data.columns]
    key = free_name(RESPONSE_KEY, taken)
    value = free_name(RESPONSE_VALUE, taken + [key])
    parts, dates = [], []
    for name in responses:
        part = data.drop(columns=[r for r in responses])
        part.insert(0, key, name)
        part[value] = data[name].to_numpy()
        part[REASON] = [_own_reasons(text, name, responses) for text in data[REASON].tolist()]
        parts.append(part)
        dates.append(obs.dates)
    stacked = pd.concat(parts, ignore_index=True)
    numeric = (value, *(c for c in obs.numeric_columns if c not in responses))
    info = dataclasses.replace(obs.info, rows_read=len(stacked), warnings=(
        *obs.info.warnings, f"{len(responses)} responses ({', '.join(responses)}): every row read appears once per "
                            f"response, with the response's name in the column '{key}'"))
    return dataclasses.replace(obs, data=stacked, group_columns=(key, *obs.group_columns), y=value,
                               numeric_columns=numeric, info=info,
                               dates=pd.concat(dates, ignore_index=True) if len(obs.dates.columns) else obs.dates)


def _own_reasons(text: str, response: str, responses: Sequence[str]) -> str:
    """The row's reasons without those about the other responses' cells ('COL: problem' parts)."""
    if not text:
        return text
    others = [f"{r}: " for r in responses if r != response]
    return "; ".join(p for p in str(text).split("; ") if not any(p.startswith(o) for o in others))
