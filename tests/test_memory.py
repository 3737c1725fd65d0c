"""The huge-page switch is scoped: restored after the block, also after an error."""

from __future__ import annotations

import numpy as np
import pytest

from sheetfit.memory import ordinary_pages

switch = np._core.multiarray._set_madvise_hugepage


@pytest.mark.parametrize("before", [True, False])
def test_previous_setting_comes_back(before):
    old = switch(before)
    try:
        with ordinary_pages():
            assert switch(False) is False        # inside: off
        assert switch(before) is before           # after: as it was
        with pytest.raises(RuntimeError):
            with ordinary_pages():
                raise RuntimeError("boom")
        assert switch(before) is before
    finally:
        switch(old)
