"""The analysis settings: the one home of every choice, default, limit and flag threshold.

:class:`AnalysisSettings` is built once per request by :meth:`AnalysisSettings.build`, which checks
everything (options, items, reverse keys, thresholds) and raises :class:`InputError` with a code;
nothing downstream checks again. :data:`OPTIONS` lists the settings with their help texts, served by
``GET /api/options`` (:meth:`AnalysisSettings.describe`); the flag thresholds are
:data:`server.stats.flags.THRESHOLDS`.
"""
from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from ..stats.errors import InputError
from ..stats.flags import THRESHOLDS, resolve_thresholds

__all__ = ["DISPLAY", "OPTIONS", "AnalysisSettings", "Option"]


@dataclass(frozen=True)
class Option:
    """One analysis setting: its kind, default, allowed values or range, and a help text."""

    name: str
    type: str  # "choice", "integer" or "number"
    default: Any
    label: str
    help: str
    choices: tuple[tuple[Any, str], ...] = ()  # (value, label)
    min: float | None = None
    max: float | None = None
    nullable: bool = False  # None is a value of its own (n_factors: automatic), not "the default"

    @property
    def values(self) -> tuple[Any, ...]:
        return tuple(v for v, _ in self.choices)

    def describe(self) -> dict:
        out: dict[str, Any] = {"name": self.name, "type": self.type, "default": self.default, "label": self.label}
        if self.choices:
            out["choices"] = [{"value": v, "label": lab} for v, lab in self.choices]
        if self.min is not None:
            out["min"] = self.min
        if self.max is not None:
            out["max"] = self.max
        out["help"] = self.help
        return out


#: Every analysis setting, in the order the settings page shows them.
OPTIONS: tuple[Option, ...] = (
    Option("correlation", "choice", "pearson", "Correlation",
           "Which correlations the factor sections use. Polychoric treats the answers as ordered categories "
           "of a continuous latent response (Olsson 1979); reliability always uses the observed answers.",
           choices=(("pearson", "Pearson"), ("polychoric", "Polychoric (ordinal answers)"))),
    Option("missing", "choice", "pairwise", "Missing answers",
           "Pairwise uses every answer given to each pair of items; listwise keeps only the respondents who "
           "answered every active item.",
           choices=(("pairwise", "Pairwise (every answer counts)"),
                    ("listwise", "Listwise (complete respondents only)"))),
    Option("extraction", "choice", "minres", "Extraction",
           "How the factors are fitted: minimum residual (least squares), maximum likelihood (gives a "
           "chi-square test) or principal axis factoring.",
           choices=(("minres", "Minimum residual"), ("ml", "Maximum likelihood"), ("paf", "Principal axis"))),
    Option("rotation", "choice", "oblimin", "Rotation",
           "How the factors are rotated to simple structure. Oblique rotations (oblimin, promax, geomin) let "
           "factors correlate; varimax and quartimax keep them uncorrelated (Browne 2001).",
           choices=(("oblimin", "Oblimin (quartimin)"), ("promax", "Promax"), ("geomin", "Geomin"),
                    ("varimax", "Varimax (orthogonal)"), ("quartimax", "Quartimax (orthogonal)"),
                    ("none", "None"))),
    Option("gamma", "number", 0.0, "Oblimin gamma",
           "Oblimin's gamma: 0 is quartimin; negative values favour less correlated factors. Used by the "
           "oblimin rotation only.", min=-5.0, max=1.0),
    Option("n_factors", "integer", None, "Number of factors",
           "How many factors to extract; empty means the number parallel analysis suggests. At most half the "
           "number of active items are extracted.", min=1, max=50, nullable=True),
    Option("pa_iterations", "integer", 500, "Parallel-analysis iterations",
           "How many random data sets parallel analysis draws (Horn 1965); more give steadier thresholds.",
           min=10, max=5000),
    Option("pa_variant", "choice", "components", "Parallel-analysis eigenvalues",
           "Compare the eigenvalues of the correlation matrix (components) or of the reduced matrix with "
           "squared multiple correlations on the diagonal (factors).",
           choices=(("components", "Principal components"), ("factors", "Common factors (reduced matrix)"))),
    Option("pa_iterations_polychoric", "integer", 30, "Parallel-analysis iterations (polychoric)",
           "With polychoric correlations parallel analysis compares with permuted ordinal data (each item's "
           "answers shuffled, Garrido, Abad & Ponsoda 2013); each draw needs a polychoric matrix (about 70 ms "
           "for 24 items), so fewer draws are made than for Pearson correlations, keeping a drop under a few "
           "seconds. Raise it for the final decision.", min=10, max=2000),
    Option("zero_cell_correction", "number", 0.5, "Zero-cell correction (polychoric)",
           "Added to the empty cells of an item pair's table before its polychoric correlation is estimated; "
           "0.5 is common practice (a continuity correction). 0 estimates the tables as they are, which "
           "can push a correlation to +-1.", min=0.0, max=1.0),
    Option("grouping", "choice", "construct", "Subscales",
           "How items are grouped into subscales for the per-subscale item analysis and reliability: by the "
           "codebook's constructs, by each item's primary factor in the current solution, or not at all (the "
           "whole pool). Without codebook constructs, construct grouping falls back to factors.",
           choices=(("construct", "Codebook constructs"), ("factor", "Primary factor"),
                    ("pool", "None (whole pool)"))),
    Option("seed", "integer", 20261202, "Random seed",
           "Seed of the random draws (parallel analysis, rotation starts): the same seed gives the same answer.",
           min=0, max=2 ** 32 - 1),
)
_BY_NAME = {o.name: o for o in OPTIONS}

#: Options of how the dashboard shows an answer (never part of a request), served under ``display``.
DISPLAY: tuple[Option, ...] = (
    Option("loading_cutoff", "number", 0.30, "Hide loadings below",  # common practice
           "Loadings whose size is below this value are left blank in the heatmap (the value stays in its "
           "hover text and in the keyboard read-out). 0 shows every loading.", min=0.0, max=1.0),
)
_LISTS = ("items", "reverse", "thresholds")  # request fields that are not options of the settings page


def _check_option(o: Option, value: Any) -> Any:
    """The value of ``o`` in canonical form, or an InputError (code ``bad_option``) naming it."""
    if o.type == "choice":
        if value not in o.values:
            raise InputError(f"'{o.name}' must be one of {', '.join(map(str, o.values))}; got '{value}'.",
                             code="bad_option", details={"field": o.name, "value": value})
        return value
    whole = o.type == "integer"
    if isinstance(value, bool) or not isinstance(value, (int, float)) or (whole and not float(value).is_integer()):
        kind = "a whole number" if whole else "a number"
        raise InputError(f"'{o.name}' must be {kind}{', or null' if o.nullable else ''}; got {value!r}.",
                         code="bad_option", details={"field": o.name, "value": str(value)})
    v = int(value) if whole else float(value)
    if not math.isfinite(v) or (o.min is not None and v < o.min) or (o.max is not None and v > o.max):
        raise InputError(f"'{o.name}' must be between {o.min:g} and {o.max:g}; got {v:g}.", code="bad_option",
                         details={"field": o.name, "value": v})
    return v


def _names_list(value: Any, field_name: str) -> list[str]:
    if isinstance(value, str) or not isinstance(value, Sequence):
        raise InputError(f"'{field_name}' must be a list of item names.", code="bad_option",
                         details={"field": field_name})
    return [str(v) for v in value]


@dataclass(frozen=True)
class AnalysisSettings:
    """Every choice of one analysis, checked and in canonical form.

    ``items`` are the active items in the dataset's column order (items without variance removed and
    listed in ``excluded``); ``reverse`` the reverse-keyed items of the whole dataset; ``thresholds``
    the flag thresholds the request changed (``None``: all defaults).
    """

    items: tuple[str, ...]
    reverse: tuple[str, ...]
    excluded: tuple[str, ...]
    correlation: str
    missing: str
    extraction: str
    rotation: str
    gamma: float
    n_factors: int | None
    pa_iterations: int
    pa_variant: str
    pa_iterations_polychoric: int
    zero_cell_correction: float
    grouping: str
    seed: int
    thresholds: Mapping[str, float] | None

    @classmethod
    def build(cls, request: Mapping[str, Any] | None, *, names: Sequence[str], declared_reverse: Sequence[str] = (),
              constant: Sequence[str] = ()) -> AnalysisSettings:
        """Check a request against a dataset and fill the defaults.

        Parameters
        ----------
        request : mapping
            ``{"items", "reverse", "thresholds", <any OPTIONS name>}``; a missing key or ``None`` takes the
            default (for ``n_factors``, ``None`` means "as parallel analysis suggests").
        names : sequence of str
            The dataset's item names, in column order.
        declared_reverse : sequence of str
            The items the codebook declares reverse-keyed (used when the request gives no ``reverse``).
        constant : sequence of str
            Items without variance: they are left out of ``items`` and listed in ``excluded``.
        """
        req = dict(request or {})
        unknown = sorted(k for k in req if k not in _BY_NAME and k not in _LISTS)
        if unknown:
            raise InputError(f"Unknown setting(s): {', '.join(unknown)}. Known settings are "
                             f"{', '.join([*_BY_NAME, *_LISTS])}.", code="unknown_setting",
                             details={"settings": unknown})
        values: dict[str, Any] = {}
        for o in OPTIONS:
            given = req.get(o.name)
            values[o.name] = o.default if given is None else _check_option(o, given)
        names = [str(n) for n in names]
        known = set(names)
        items = names if req.get("items") is None else _names_list(req["items"], "items")
        missing_items = [i for i in items if i not in known]
        if missing_items:
            raise InputError(f"Unknown item(s): {', '.join(missing_items)}. The dataset has {len(names)} items.",
                             code="unknown_item", details={"items": missing_items})
        if len(set(items)) != len(items):
            dup = sorted({i for i in items if items.count(i) > 1})
            raise InputError(f"Item(s) listed twice: {', '.join(dup)}.", code="duplicate_item",
                             details={"items": dup})
        flat = set(constant)
        excluded = [i for i in items if i in flat]
        chosen = set(items) - flat
        if len(chosen) < 2:
            raise InputError(f"At least 2 active items with some variance are needed; got {len(chosen)}"
                             + (f" ({', '.join(excluded)} had no variance)" if excluded else "") + ".",
                             code="too_few_items", details={"n_items": len(chosen), "excluded": excluded})
        if req.get("reverse") is None:
            rev = set(declared_reverse)
        else:
            rev_given = _names_list(req["reverse"], "reverse")
            bad = [r for r in rev_given if r not in known]
            if bad:
                raise InputError(f"Unknown item(s) in 'reverse': {', '.join(bad)}.", code="unknown_item",
                                 details={"items": bad, "field": "reverse"})
            rev = set(rev_given)
        thresholds = req.get("thresholds")
        if thresholds is not None:
            if not isinstance(thresholds, Mapping):
                raise InputError("'thresholds' must map threshold names to numbers.", code="bad_threshold",
                                 details={"field": "thresholds"})
            resolve_thresholds(thresholds)  # unknown names or values out of range: InputError now
            thresholds = {str(k): float(v) for k, v in thresholds.items()}
        return cls(items=tuple(n for n in names if n in chosen), reverse=tuple(n for n in names if n in rev),
                   excluded=tuple(excluded), thresholds=thresholds, **values)

    def to_dict(self) -> dict:
        """The settings as the answer's ``settings`` section."""
        return {"items": list(self.items), "reverse": list(self.reverse), "excluded": list(self.excluded),
                "missing": self.missing, "correlation": self.correlation, "extraction": self.extraction,
                "rotation": self.rotation, "gamma": self.gamma, "n_factors": self.n_factors,
                "thresholds": None if self.thresholds is None else dict(self.thresholds),
                "pa_iterations": self.pa_iterations, "pa_variant": self.pa_variant,
                "pa_iterations_polychoric": self.pa_iterations_polychoric,
                "zero_cell_correction": self.zero_cell_correction, "grouping": self.grouping, "seed": self.seed}

    def key(self) -> str:
        """A canonical text of every choice (equal settings, equal key): the cache key of an answer."""
        return json.dumps(self.to_dict(), sort_keys=True)

    @staticmethod
    def describe() -> dict:
        """``GET /api/options``: every setting, flag threshold and display option with its default, range and help."""
        return {"settings": [o.describe() for o in OPTIONS],
                "thresholds": [{"name": t.name, "default": t.default, "min": t.min, "max": t.max, "label": t.label,
                                "source": t.source, "help": t.help} for t in THRESHOLDS],
                "display": [o.describe() for o in DISPLAY]}

    @staticmethod
    def option(name: str) -> Option:
        """The :class:`Option` called ``name`` (KeyError if there is none)."""
        return _BY_NAME[name]
