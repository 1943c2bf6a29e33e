"""Scalewright: a local dashboard for trimming a draft pool of rating-scale items.

From Python (installed, the package is ``scalewright``)::

    import scalewright
    answer = scalewright.analyse("responses.csv", codebook="codebook.csv", missing_codes=[-9], n_factors=3)
    answer.reliability.result.alpha

:func:`analyse` is :func:`server.script.analyse`, imported on first use so that ``import scalewright`` stays
cheap and sets the thread variables below before numpy loads.
"""
from __future__ import annotations

import os as _os
from typing import TYPE_CHECKING, Any

# The matrices here are small (a few dozen items): one BLAS thread is many times faster than several
# threads fighting over two cores. Must be set before numpy is first imported.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_var, "1")

__version__ = "0.1.0"


if TYPE_CHECKING:
    from os import PathLike

    import pandas as pd

    from .analysis import AnalysisAnswer


def analyse(responses: str | PathLike[str] | pd.DataFrame, codebook: str | PathLike[str] | pd.DataFrame | None = None,
            **options: Any) -> AnalysisAnswer:
    """The analysis of a response file or DataFrame: see :func:`server.script.analyse`."""
    from .script import analyse as _analyse

    return _analyse(responses, codebook, **options)
