"""One analysis of a dataset as a pipeline of sections over the engine's cached inputs.

``settings`` (:class:`AnalysisSettings`, the one home of choices, defaults and limits) ->
``matrices`` (pool and active-item matrices) -> ``reliability``, ``items``, ``factors``, ``flags``
-> :func:`run` returning an :class:`AnalysisAnswer` (``answer``). Statistics live in ``server.stats``;
nothing here imports the engine or the API.
"""
from __future__ import annotations

from .answer import AnalysisAnswer
from .inputs import AnalysisInputs
from .pipeline import run
from .settings import OPTIONS, AnalysisSettings

__all__ = ["OPTIONS", "AnalysisAnswer", "AnalysisInputs", "AnalysisSettings", "run"]
