"""Running a recipe: each study's data file is read once, and each analysis runs through its
registry entry."""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from sensiv.analyses.kind import RunContext
from sensiv.analyses.registry import entry
from sensiv.core.errors import InputError
from sensiv.data import Spec, from_frame, read_table
from sensiv.recipes.parse import parse_recipe
from sensiv.recipes.schema import AnalysisRun, Recipe, RunResult, Study


def spec_of(roles: Mapping[str, Any]) -> Spec:
    """The :class:`~sensiv.data.Spec` of a study's ``[data]`` table."""
    return Spec(outcome=roles["outcome"], treatments=tuple(roles["treatments"]),
                instruments=tuple(roles["instruments"]),
                controls=tuple(roles.get("controls", ())), cluster=roles.get("cluster"),
                weight=roles.get("weight"), constant=roles.get("constant", True),
                where=roles.get("where"), categorical=tuple(roles.get("categorical", ())))


def _context(study: Study, source, frame, spec, seed: int | None) -> RunContext:
    inf = study.inference
    common = {"se": inf.get("se"), "confidence_level": inf.get("level", 0.95),
              "small": inf.get("small", False)}
    return RunContext(source=source, frame=frame, spec=spec, roles=study.data, common=common,
                      seed=seed, study=study.name)


def run_recipe(recipe: Recipe | str | Path) -> RunResult:
    """Run every analysis of every study of ``recipe`` (a parsed recipe or the path of a TOML
    file); the data file of a study is read once."""
    if not isinstance(recipe, Recipe):
        recipe = parse_recipe(recipe)
    runs = []
    for study in recipe.studies:
        source = frame = spec = None
        if study.data is not None:
            frame = read_table(study.data["path"])
            spec = spec_of(study.data)
            source = from_frame(frame, spec)
        for index, analysis in enumerate(study.analyses, start=1):
            seed = analysis.seed if analysis.seed is not None else recipe.seed
            kind = entry(analysis.kind)
            if kind.run is None:
                raise InputError(f"analysis kind '{analysis.kind}' cannot run yet in this "
                                 "version")
            context = _context(study, source, frame, spec, seed)
            result = kind.run(context, analysis.options)
            runs.append(AnalysisRun(study.name, index, analysis, result))
    return RunResult(recipe, tuple(runs))
