"""Recipes: a TOML file that names the data, the roles, the covariance and a list of analyses.

A recipe makes a referee-response analysis reproducible: ``sensiv run RECIPE.toml --out DIR``
runs every analysis and writes every table, figure and a report.  Schema (all paths relative to
the recipe file)::

    title = "Irrigation and maize yield (INVENTED data)"   # optional
    seed = 20261201                                         # optional: seeds every resampling
    formats = ["png"]                                       # optional: figure formats

    [[study]]                      # one or more; a recipe without [[study]] is one study
    name = "irrigation"
    description = "..."            # optional

    [study.data]                   # omitted for a study of reported numbers only
    path = "irrigation.csv"
    outcome = "maize_yield"
    treatments = ["irrigation_hours"]
    instruments = ["height_m"]
    controls = ["plot_ha", "soil"] # optional
    cluster = "village"            # optional; two-way: cluster = ["village", "year"]
    weight = "w"                   # optional
    constant = true                # optional
    where = "year >= 2000"         # optional: keep only the rows matching this row filter
    categorical = ["district"]     # optional: integer-coded controls turned into indicators
    absorb = ["county", "year"]    # optional: fixed effects partialled out (no indicators)
    absorb_tolerance = 1e-10       # optional: where alternating projections stop (2+ absorbed)
    engine = "duckdb"              # optional: numpy (default) | duckdb | dask; path may then
                                   #   also be a directory or glob of files, or file.duckdb::table
    scheduler = "tcp://host:8786"  # optional, with engine = "dask": a running Dask scheduler

    [study.labels]                 # optional: names for readers (figures, text; not JSON keys)
    maize_yield = "Maize yield (t/ha)"          # a trailing (unit) gives the column's unit
    irrigation_hours = "Irrigation (hours)"

    [study.inference]              # optional
    se = "cluster"                 # classic | robust | cluster
    level = 0.95
    small = false

    [[study.analysis]]
    kind = "sweep"                 # fit | sweep | prior | corrbound | discrete | published |
    direct = ["-0.005:0.005"]      #   calibrate; the other keys are that command's options
    label = "direct effect of height up to 5 kg/ha per metre"   # optional

Unknown keys, wrong types and missing files are reported with the key and its line.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sensiv.core.labels import NONE, Labels

FORMATS = ("png", "pdf", "svg")
SE_CHOICES = ("classic", "robust", "cluster")

# Allowed keys and their types per table; ``float`` accepts TOML integers too; a tuple of
# types accepts any of them (``cluster``: one name, or a list of two for two-way
# clustering).  The keys of each analysis kind are its registry entry's ``options``.
TOP_KEYS = {"title": str, "seed": int, "formats": list, "study": list, "name": str,
            "description": str, "data": dict, "inference": dict, "analysis": list,
            "labels": dict}
STUDY_KEYS = {"name": str, "description": str, "data": dict, "inference": dict,
              "analysis": list, "labels": dict}
DATA_KEYS = {"path": str, "outcome": str, "treatments": list, "instruments": list,
             "controls": list, "cluster": (str, list), "weight": str, "constant": bool,
             "where": str, "categorical": list, "absorb": list, "absorb_tolerance": float, "engine": str,
             "scheduler": str}
INFERENCE_KEYS = {"se": str, "level": float, "small": bool}
COMMON_KEYS = {"kind": str, "label": str, "seed": int}


@dataclass(frozen=True, slots=True)
class Analysis:
    """One analysis of a study: its kind, options and a label for the report."""

    kind: str
    options: dict[str, Any]
    label: str
    seed: int | None


@dataclass(frozen=True, slots=True)
class Study:
    """Data, roles, inference options and analyses of one study."""

    name: str
    description: str
    data: dict[str, Any] | None
    inference: dict[str, Any]
    analyses: tuple[Analysis, ...]
    labels: Labels = NONE          # [study.labels]: column → reader-facing name


@dataclass(frozen=True, slots=True)
class Recipe:
    """A parsed, validated recipe (paths resolved against the recipe's folder)."""

    path: Path
    title: str
    seed: int | None
    formats: tuple[str, ...]
    studies: tuple[Study, ...]


@dataclass(frozen=True, slots=True)
class AnalysisRun:
    """A finished analysis: the study, the analysis and its result object."""

    study: str
    index: int
    analysis: Analysis
    result: Any

    @property
    def stem(self) -> str:
        return f"{self.study}-{self.index}-{self.analysis.kind}"


@dataclass(frozen=True, slots=True)
class RunResult:
    recipe: Recipe
    runs: tuple[AnalysisRun, ...] = field(default=())
