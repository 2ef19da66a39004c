"""``scipy.fft`` for the analysis modules, imported on the first transform instead of at import time.

``import scipy.fft`` costs about 170 ms of CPU (scipy 1.17: it loads scipy's array-API layer and, for
the log-spaced FFT, ``scipy.special``), more than the whole analysis package. A module that writes

    from .lazy import scipy

keeps calling ``scipy.fft.rfft(...)`` as before; ``scipy.fft`` is the real module, imported on the first
call (and from then on a dictionary look-up), so commands that never transform a block never load it.
"""

from __future__ import annotations

import importlib
from types import ModuleType


class _Scipy:
    """Stands for the ``scipy`` package in a module's namespace; only ``.fft`` is provided."""

    @property
    def fft(self) -> ModuleType:
        return importlib.import_module("scipy.fft")


scipy = _Scipy()
