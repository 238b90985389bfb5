"""Reading and validating a recipe: every problem is an :class:`InputError` that names the key
and its line.  The keys each analysis kind accepts come from its registry entry."""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from sensiv.analyses.registry import KINDS
from sensiv.core import labels
from sensiv.core.errors import InputError
from sensiv.core.labels import Labels
from sensiv.data import ENGINES
from sensiv.data.datasets import is_dataset
from sensiv.data.where import parse_filter
from sensiv.sensitivity.published_covariance import ROLES as PUBLISHED_ROLES
from sensiv.recipes.schema import (COMMON_KEYS, DATA_KEYS, FORMATS, INFERENCE_KEYS, SE_CHOICES,
                                   STUDY_KEYS, TOP_KEYS, Analysis, Recipe, Study)


# ----------------------------------------------------------------------------- parsing
class KeyLines:
    """Finds the line of a key in the recipe text, for error messages.

    ``scope`` narrows the search to the text after the n-th header of a table array
    (``("analysis", 2)`` is the third ``[[analysis]]`` or ``[[study.analysis]]``).
    """

    def __init__(self, text: str, path: Path) -> None:
        self._lines = text.splitlines()
        self._path = path

    def _start(self, scope: tuple[str, int] | None) -> int:
        if scope is None:
            return 0
        name, occurrence = scope
        header = re.compile(rf"^\s*\[\[(study\.)?{re.escape(name)}\]\]")
        seen = -1
        for number, line in enumerate(self._lines):
            if header.match(line):
                seen += 1
                if seen == occurrence:
                    return number
        return 0

    def where(self, key: str, scope: tuple[str, int] | None = None) -> str:
        pattern = re.compile(rf"^\s*{re.escape(key)}\s*=")
        start = self._start(scope)
        for number in range(start, len(self._lines)):
            if pattern.match(self._lines[number]):
                return f"{self._path.name} line {number + 1}"
        return self._path.name

    def fail(self, key: str, message: str, scope: tuple[str, int] | None = None) -> InputError:
        return InputError(f"{self.where(key, scope)}: {message}")


def _type_name(kind) -> str:
    if isinstance(kind, tuple):
        return " or ".join(_type_name(k) for k in kind)
    return {str: "a string", int: "an integer", float: "a number", bool: "true or false",
            list: "a list", dict: "a table"}[kind]


def _check_table(table: Mapping, allowed: Mapping[str, type], where: str,
                 lines: KeyLines, scope: tuple[str, int] | None = None) -> None:
    for key, value in table.items():
        if key not in allowed:
            raise lines.fail(key, f"unknown key '{key}' in {where}; allowed: "
                                  f"{', '.join(sorted(allowed))}", scope)
        kind = allowed[key]
        ok = (isinstance(value, (int, float)) and not isinstance(value, bool)
              if kind is float else
              isinstance(value, int) and not isinstance(value, bool) if kind is int else
              isinstance(value, kind))
        if not ok:
            raise lines.fail(key, f"'{key}' in {where} must be {_type_name(kind)}; got "
                                  f"{value!r}", scope)
        if kind is float and not math.isfinite(float(value)):
            raise lines.fail(key, f"'{key}' in {where} must be finite", scope)


def _strings(value: list, key: str, where: str, lines: KeyLines,
             scope: tuple[str, int] | None = None) -> list[str]:
    if not all(isinstance(v, str) for v in value):
        raise lines.fail(key, f"'{key}' in {where} must be a list of strings; got {value!r}",
                         scope)
    return list(value)


def _analysis(entry: Any, where: str, lines: KeyLines, has_data: bool,
              scope: tuple[str, int]) -> Analysis:
    if not isinstance(entry, dict):
        raise InputError(f"{lines.where('analysis')}: each [[analysis]] must be a table")
    kind = entry.get("kind")
    if not isinstance(kind, str):
        raise lines.fail("kind", f"'kind' in {where} must be a string naming the analysis, "
                                 f"e.g. kind = \"sweep\"; got {kind!r}", scope)
    if kind not in KINDS:
        raise lines.fail("kind", f"analysis kind {kind!r} in {where} is not known; choose one "
                                 f"of {', '.join(KINDS)}", scope)
    _check_table(entry, {**COMMON_KEYS, **KINDS[kind].options}, f"{where} ({kind})", lines, scope)
    if KINDS[kind].needs_data and not has_data and not (kind == "discrete" and "counts" in entry):
        raise lines.fail("kind", f"analysis '{kind}' in {where} needs a [data] table", scope)
    options = {k: v for k, v in entry.items() if k not in COMMON_KEYS}
    for key in ("direct", "prior"):
        if key in options:
            options[key] = _strings(options[key], key, where, lines, scope)
    label = entry.get("label", kind)
    return Analysis(kind, options, label, entry.get("seed"))


def _study(table: Mapping, where: str, lines: KeyLines, base: Path, index: int,
           first_analysis: int) -> Study:
    _check_table(table, STUDY_KEYS, where, lines)
    data = table.get("data")
    if data is not None:
        _check_table(data, DATA_KEYS, f"{where}.data", lines)
        for key in ("outcome", "treatments", "instruments"):
            if key not in data:
                raise lines.fail("data", f"{where}.data lacks '{key}'")
        for key in ("treatments", "instruments", "controls", "categorical", "absorb"):
            if key in data:
                data = {**data, key: _strings(data[key], key, f"{where}.data", lines)}
        if isinstance(data.get("cluster"), list):
            data = {**data, "cluster": _strings(data["cluster"], "cluster", f"{where}.data",
                                                lines)}
        if "where" in data:
            try:
                parse_filter(data["where"])
            except InputError as exc:
                raise lines.fail("where", f"'where' in {where}.data: {exc}") from exc
        tolerance = data.get("absorb_tolerance", 0.5)
        if not 0.0 < tolerance < 1.0:
            raise lines.fail("absorb_tolerance", f"absorb_tolerance {tolerance!r} in {where}.data "
                                                 "must be a number in (0, 1), e.g. 1e-10")
        if "path" not in data:
            raise lines.fail("data", f"{where}.data lacks 'path' (the data file)")
        if data.get("engine", "numpy") not in ENGINES:
            raise lines.fail("engine", f"engine '{data['engine']}' in {where}.data is not an "
                                       f"engine; choose one of {', '.join(ENGINES)}")
        file, table_sep, table_name = data["path"].partition("::")
        resolved = (base / file).resolve()
        if not (resolved.is_file() or (not table_sep and _holds_data(resolved))):
            raise lines.fail("path", f"data file '{data['path']}' in {where}.data "
                                     f"{not_a_file(resolved)}; fix the path")
        data = {**data, "path": str(resolved) + table_sep + table_name}
    inference = dict(table.get("inference", {}))
    _check_table(inference, INFERENCE_KEYS, f"{where}.inference", lines)
    if "se" in inference and inference["se"] not in SE_CHOICES:
        raise lines.fail("se", f"se '{inference['se']}' in {where}.inference is not one of "
                               f"{', '.join(SE_CHOICES)}")
    entries = table.get("analysis", [])
    if not entries:
        raise lines.fail("analysis", f"{where} has no [[analysis]] entries; add at least one")
    analyses = tuple(_analysis(e, f"{where}.analysis {j + 1}", lines, data is not None,
                               ("analysis", first_analysis + j))
                     for j, e in enumerate(entries))
    for j, a in enumerate(analyses):
        if a.kind == "discrete" and "counts" not in a.options and (data or {}).get("absorb"):
            raise lines.fail("absorb", f"analysis 'discrete' in {where}.analysis {j + 1} "
                                       "bounds the cells of discrete outcome, treatment and "
                                       "instrument and cannot absorb fixed effects (absorb = "
                                       f"{data['absorb']!r} in {where}.data): remove absorb "
                                       "from this study's [data], or put the discrete analysis "
                                       "in a study of its own without absorb")
        for key in ("polytope", "prior_file", "counts", "per_instrument"):
            if key in a.options:
                resolved = (base / a.options[key]).resolve()
                if not resolved.is_file():
                    raise lines.fail(key, f"file '{a.options[key]}' ({key}) "
                                          f"{not_a_file(resolved)}; fix the path")
                a.options[key] = str(resolved)
    name = table.get("name", f"study{index + 1}")
    if not re.fullmatch(r"[A-Za-z0-9_.-]+", name):
        raise lines.fail("name", f"study name {name!r} may hold only letters, digits, '_', "
                                 "'.' and '-' (it names output files)")
    return Study(name, table.get("description", ""), data, inference, analyses,
                 _labels(table, data, where, lines))


DATA_ROLES = ("outcome", "treatments", "instruments", "controls", "categorical", "absorb",
              "cluster", "weight")
"""Keys of ``[study.data]`` that name columns (the columns ``[study.labels]`` may name)."""


def _labels(table: Mapping, data: Mapping | None, where: str, lines: KeyLines) -> Labels:
    """``[study.labels]``: text values, for columns the study's data roles name (or, for a
    study of printed numbers only, ``outcome``, ``treatment`` and ``instrument``)."""
    entries = table.get("labels", {})
    for column, text in entries.items():
        if not isinstance(text, str):
            raise lines.fail(column, f"label of {column!r} in {where}.labels is {text!r}, not a "
                                     f"text: write {column} = \"Irrigation (hours)\"")
    if data is None:
        columns = list(PUBLISHED_ROLES)
    else:
        columns = [name for key in DATA_ROLES
                   for name in ([data[key]] if isinstance(data.get(key), str)
                                else data.get(key) or [])]
    try:
        parsed = labels.parse(entries, option=f"{where}.labels")
        labels.check_columns(parsed, columns, option=f"{where}.labels")
    except InputError as exc:
        bad = next((c for c in entries if c not in columns), "labels")
        raise lines.fail(bad, str(exc)) from exc
    return parsed


def _holds_data(path: Path) -> bool:
    """A glob, or a directory with Parquet / CSV files: a partitioned data set."""
    if path.is_dir():
        return any(p.suffix.lower() in (".parquet", ".pq", ".csv") for p in path.rglob("*"))
    return is_dataset(str(path))


def not_a_file(path: Path) -> str:
    """How a path that is not a readable file fails: a directory, or missing."""
    if path.is_dir():
        return "is a directory, not a file"
    return f"does not exist (looked for {path.resolve()})"


def recipe_text(path: Path) -> str:
    """The recipe's text; a file that is not UTF-8 is refused naming the byte and its line."""
    raw = path.read_bytes()
    try:
        return raw.decode("utf-8-sig")  # a leading byte-order mark is allowed
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        raise InputError(f"{path.name}: not UTF-8 text (byte 0x{raw[exc.start]:02x} at "
                         f"position {exc.start}, line {line}); save the recipe as UTF-8 "
                         "(TOML files must be UTF-8)") from None


def parse_recipe(path: str | Path) -> Recipe:
    """Read and validate a recipe; every problem is an :class:`InputError` naming key and line."""
    import tomllib

    p = Path(path)
    if not p.is_file():
        raise InputError(f"recipe '{path}' {not_a_file(p)}; check the path")
    text = recipe_text(p)
    try:
        content = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{p.name}: not valid TOML ({exc}); fix the syntax") from exc
    lines = KeyLines(text, p)
    _check_table(content, TOP_KEYS, "the recipe", lines)
    formats = tuple(_strings(content.get("formats", ["png"]), "formats", "the recipe", lines))
    for f in formats:
        if f not in FORMATS:
            raise lines.fail("formats", f"figure format '{f}' is not one of "
                                        f"{', '.join(FORMATS)}")
    if "study" in content:
        single = {k for k in ("data", "inference", "analysis", "name", "description")
                  if k in content}
        if single:
            raise lines.fail(sorted(single)[0], "a recipe with [[study]] tables cannot also "
                                                "have top-level data/analysis keys")
        tables = content["study"]
        if not tables:
            raise lines.fail("study", "'study' is an empty list: the recipe has no analyses; "
                                      "add [[study]] tables, each with [[study.analysis]] entries")
        for i, t in enumerate(tables):
            if not isinstance(t, dict):
                raise lines.fail("study", f"study {i + 1} is {t!r}, not a table: write each "
                                          "study as a [[study]] table with name, data and "
                                          "[[study.analysis]] entries")
    else:
        tables = [{k: content[k] for k in STUDY_KEYS if k in content}]
    studies, first = [], 0
    for i, t in enumerate(tables):
        studies.append(_study(t, f"[[study]] {i + 1}", lines, p.parent, i, first))
        first += len(t.get("analysis", [])) if isinstance(t, dict) else 0
    studies = tuple(studies)
    names = [s.name for s in studies]
    if len(set(names)) != len(names):
        raise lines.fail("name", "study names must be distinct (they name output files)")
    return Recipe(p, content.get("title", p.stem), content.get("seed"), formats, studies)
