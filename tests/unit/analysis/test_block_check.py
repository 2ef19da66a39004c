"""The point analysis refuses a block holding any NaN or inf, in one line that counts them, wherever they sit
and however they mix (the check reads the block's sum first: one non-finite sample makes it non-finite,
+inf and -inf together make it NaN)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from rotorwatch.analysis.point import PointAnalyzer
from rotorwatch.errors import InputError

from .helpers import machine


@pytest.fixture(scope="module")
def analyzer() -> PointAnalyzer:
    m = machine(analysis={"fmax_hz": 2000})
    return PointAnalyzer(m, m.points[0], 10240.0)


@pytest.mark.parametrize("bad", [[np.nan], [np.inf], [-np.inf], [np.inf, -np.inf], [np.nan, np.inf, 1.0]])
def test_non_finite_samples_are_counted(analyzer, bad):
    x = np.random.default_rng(0).standard_normal(analyzer.min_samples)
    x[[7, 1000, 4000][: len(bad)]] = bad
    n_bad = int(np.count_nonzero(~np.isfinite(x)))
    with pytest.raises(InputError, match=rf"^block holds {n_bad} non-finite samples \(NaN or inf\)$"), \
            warnings.catch_warnings():
        warnings.simplefilter("error")  # said in words, without a RuntimeWarning on the side
        analyzer.analyze(x)

