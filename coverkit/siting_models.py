"""The covering models a siting run may use, one entry each: adding a model is one :class:`SitingModel` in
:data:`MODELS` (and its formulation in :mod:`coverkit.siting`).

The site plan (:func:`coverkit.site_plan.solve`), the study file's validation, the command line's choices and the
report's wording all read this registry, so a model's name, the parameters it needs, its citation and the words
for its objective are held once. The library names parameters (``add``, ``busy_fraction``, ``target``), never a
command-line flag; each front end words them its own way.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd


@dataclass(frozen=True)
class SitingModel:
    """One covering model.

    Attributes
    ----------
    name
        The model's short name (``model`` in a study file and a site plan's summary).
    function_name
        Its function in :mod:`coverkit.siting` (:attr:`function` resolves it on first use, so that reading the
        registry loads no solver).
    needs
        Parameters a run must give (``add``: new sites or units; ``busy_fraction``: share of time a unit is busy).
    optional
        Parameters a run may give (``target``: LSCP share of demand to cover).
    citation
        The published source, short form (author, year) as the report prints it.
    reference
        The published source in full (author, year, title, journal).
    objective
        What the objective counts, in words (the CLI's and the summary's ``objective_name``).
    objective_unit
        How the objective value reads: ``share`` (weight covered of the total), ``count`` (sites) or ``seconds``.
    curve_model
        The model whose curve over the number of new sites is drawn (LSCP: the MCLP curve up to its count).
    curve_value, curve_label
        The value the curve chart shows for each point, from the curve table (:func:`coverkit.site_plan.curve_table`),
        and its axis label.
    data
        What the formulation runs on: ``covers`` (the boolean coverage matrix) or ``travel`` (travel seconds).
    places_units
        True when ``add`` counts units that may share a site (MEXCLP), so ``add`` may exceed the candidate count.
    """

    name: str
    function_name: str
    needs: tuple[str, ...]
    citation: str
    reference: str
    objective: str
    objective_unit: str
    curve_value: Callable[[pd.DataFrame], pd.Series]
    curve_label: str
    optional: tuple[str, ...] = ()
    curve_model: str = ""
    data: str = "covers"
    places_units: bool = False

    @property
    def function(self) -> Callable:
        """The formulation in :mod:`coverkit.siting`."""
        from coverkit import siting

        return getattr(siting, self.function_name)

    @property
    def count_word(self) -> str:
        """What ``add`` counts: ``new units`` or ``new sites``."""
        return "new units" if self.places_units else "new sites"

    def objective_text(self, value: float, total_weight: float) -> str:
        """The objective value in words: share of the total weight, a count of sites, or seconds and minutes."""
        if self.objective_unit == "seconds":
            return f"{value:,.1f} s ({value / 60:.2f} min)"
        if self.objective_unit == "count":
            return f"{int(value)}"
        return f"{value:,.1f} of {total_weight:,.1f} ({value / total_weight * 100:.1f} %)"


#: Every covering model, in the order the command line lists them. References as in each function's docstring in
#: :mod:`coverkit.siting`.
MODEL_LIST: tuple[SitingModel, ...] = (
    SitingModel(
        "mclp",
        "mclp",
        needs=("add",),
        citation="Church & ReVelle 1974",
        reference='R. Church & C. ReVelle (1974), "The maximal covering location problem", Papers of the Regional '
        "Science Association 32",
        objective="demand covered",
        objective_unit="share",
        curve_value=lambda c: c["covered_share"] * 100,
        curve_label="demand covered (%)",
    ),
    SitingModel(
        "lscp",
        "lscp",
        needs=(),
        optional=("target",),
        citation="Toregas, Swain, ReVelle & Bergman 1971",
        reference='C. Toregas, R. Swain, C. ReVelle & L. Bergman (1971), "The location of emergency service '
        'facilities", Operations Research 19(6)',
        objective="new sites needed",
        objective_unit="count",
        curve_model="mclp",
        curve_value=lambda c: c["covered_share"] * 100,
        curve_label="demand covered (%)",
    ),
    SitingModel(
        "backup",
        "backup_coverage",
        needs=("add",),
        citation="Hogan & ReVelle 1986",
        reference='K. Hogan & C. ReVelle (1986), "Concepts and applications of backup coverage", Management '
        "Science 32(11)",
        objective="demand covered twice",
        objective_unit="share",
        curve_value=lambda c: c["second_share"] * 100,
        curve_label="demand covered twice (%)",
    ),
    SitingModel(
        "mexclp",
        "mexclp",
        needs=("add", "busy_fraction"),
        citation="Daskin 1983",
        reference='M. S. Daskin (1983), "A maximum expected covering location model: formulation, properties and '
        'heuristic solution", Transportation Science 17(1)',
        objective="expected demand covered (units busy)",
        objective_unit="share",
        curve_value=lambda c: c["objective"],
        curve_label="expected demand covered",
        places_units=True,
    ),
    SitingModel(
        "p-median",
        "p_median",
        needs=("add",),
        citation="Hakimi 1964",
        reference='S. L. Hakimi (1964), "Optimum locations of switching centers and the absolute centers and '
        'medians of a graph", Operations Research 12(3)',
        objective="mean travel time (s)",
        objective_unit="seconds",
        curve_value=lambda c: c["objective"] / 60,
        curve_label="mean travel time (min)",
        data="travel",
    ),
)

#: The parameters a model may need, in words (for messages; each front end names them its own way).
PARAMETERS: dict[str, str] = {
    "add": "the number of new sites",
    "busy_fraction": "the share of time a unit is busy, 0..1",
    "target": "the share of demand to cover, 0..1",
}

#: Model name -> its entry.
BY_NAME: dict[str, SitingModel] = {m.name: m for m in MODEL_LIST}

#: The model names (the command line's choices, the study file's allowed values).
NAMES: tuple[str, ...] = tuple(BY_NAME)

#: The model a siting run uses when none is named.
DEFAULT_MODEL = "mclp"

#: What each model's objective counts, in words.
OBJECTIVE_NAMES: dict[str, str] = {m.name: m.objective for m in MODEL_LIST}


def model_named(name: str) -> SitingModel:
    """The registry entry called ``name``.

    Raises
    ------
    ModelError
        ``name`` is not a known model (the message lists the known ones).
    """
    from coverkit.errors import ModelError

    if name not in BY_NAME:
        raise ModelError(f"model '{name}' is unknown; use one of {', '.join(NAMES)}.")
    return BY_NAME[name]
