"""Reader-facing names of columns (``--label COL="Irrigation (hours)"``, recipe
``[study.labels]``, ``labels={...}`` in Python) and the units they carry.

Labels are presentation only: every computation and every JSON key keeps the column names;
figures, text and reports print a column's label where they would print its name.  A label may
end in a unit in parentheses, ``"Maize yield (t/ha)"``; then

- a direct effect of an instrument (it moves the outcome) is in the outcome's unit, "t/ha",
  or, when the instrument's label states a unit too, "t/ha per metre";
- an effect of the treatment is in "outcome unit per treatment unit", "t/ha per hour": the
  treatment's unit is put after "per" in the singular by a plain English rule on its last word
  (hours → hour, inches → inch, categories → category; a unit that does not end in a plural
  "s" is kept as written: km, %, log points → log point).

The labels in force are held in a context variable: a front end (a CLI command, a recipe
study, the Python API through the result) sets them with :func:`using` around its
presentation, and the figure and text builders ask :func:`name` / :func:`stem` /
:func:`effect_unit`, so no computing function carries them.

Examples
--------
>>> labels = parse(["maize_yield=Maize yield (t/ha)", "irrigation_hours=Irrigation (hours)"])
>>> with using(labels):
...     name("irrigation_hours"), stem("maize_yield"), effect_unit("maize_yield",
...                                                             "irrigation_hours")
('Irrigation (hours)', 'Maize yield', 't/ha per hour')
>>> name("irrigation_hours")
'irrigation_hours'
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Iterator, Mapping
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass

from sensiv.core.errors import InputError

MAX_LABEL_CHARS = 80
"""Longest label accepted (a figure axis has room for about this much)."""

SLOT = "_sensiv_labels"
"""Name of the slot of :class:`sensiv.core.results.Presentable` that holds a result's labels."""

_UNIT = re.compile(r"^(?P<stem>.*?\S)\s*\((?P<unit>[^()]*\S[^()]*)\)\s*$")
_KEEP_S = ("ss", "us", "is", "ps")   # words such as "gauss", "bus", "basis", "kbps" keep their s
_ES = ("ches", "shes", "sses", "xes", "zes")


@dataclass(frozen=True, slots=True)
class Labels:
    """Column → label pairs, in the order given (empty: every column prints as its name)."""

    pairs: tuple[tuple[str, str], ...] = ()

    def __bool__(self) -> bool:
        return bool(self.pairs)

    def get(self, column: str) -> str | None:
        """The label of ``column``, or ``None`` without one."""
        return next((text for name, text in self.pairs if name == column), None)

    def to_dict(self) -> dict[str, str]:
        """``{column: label}`` for JSON (the columns stay the keys of every other object)."""
        return dict(self.pairs)


NONE = Labels()
_ACTIVE: ContextVar[Labels] = ContextVar("sensiv_labels", default=NONE)


def parse(values: Iterable[str] | Mapping[str, str] | Labels | None,
          option: str = "--label") -> Labels:
    """Labels from ``COLUMN=TEXT`` strings (the CLI's repeated ``--label``) or a mapping.

    Raises
    ------
    InputError
        A value without ``=``, an empty column or label, a label over
        :data:`MAX_LABEL_CHARS` characters or one with a line break, or a column labelled
        twice.
    """
    if values is None:
        return NONE
    if isinstance(values, Labels):
        return values
    if isinstance(values, Mapping):
        items = list(values.items())
    elif isinstance(values, str):
        raise InputError(f"{option} takes COLUMN=TEXT pairs; got the single string "
                         f"{values!r}: give a list of them (or a mapping in Python)")
    else:
        items = [_split(value, option) for value in values]
    pairs: dict[str, str] = {}
    for column, text in items:
        column, text = _checked(column, text, option)
        if column in pairs:
            raise InputError(f"{option}: column {column!r} is labelled twice "
                             f"({pairs[column]!r} and {text!r}); keep one label per column")
        pairs[column] = text
    return Labels(tuple(pairs.items()))


def _split(value: object, option: str) -> tuple[str, str]:
    if not isinstance(value, str) or "=" not in value:
        raise InputError(f"{option} {value!r} is not COLUMN=TEXT; write e.g. "
                         f"{option} irrigation_hours=\"Irrigation (hours)\"")
    column, text = value.split("=", 1)
    return column, text


def _checked(column: object, text: object, option: str) -> tuple[str, str]:
    if not isinstance(column, str) or not column.strip():
        raise InputError(f"{option}: the column before '=' is empty in {column!r}={text!r}; "
                         "name the column to label")
    if not isinstance(text, str) or not text.strip():
        raise InputError(f"{option}: the label of column {column!r} is empty; give a text "
                         f"such as {option} {column}=\"Irrigation (hours)\"")
    text = text.strip()
    if "\n" in text or "\r" in text or len(text) > MAX_LABEL_CHARS:
        raise InputError(f"{option}: the label of column {column!r} must be one line of at "
                         f"most {MAX_LABEL_CHARS} characters; got {len(text)} characters: "
                         "shorten it")
    return column.strip(), text


def check_columns(labels: Labels, columns: Iterable[str], option: str = "--label") -> None:
    """Raise :class:`InputError` for a label of a column the specification does not use."""
    known = list(dict.fromkeys(columns))
    unknown = [column for column, _ in labels.pairs if column not in known]
    if unknown:
        raise InputError(f"{option} names column(s) {', '.join(map(repr, unknown))} that the "
                         f"model does not use; label only its columns "
                         f"({', '.join(map(repr, known))}) or remove the label")


# ----------------------------------------------------------------------------- the context
@contextmanager
def using(labels: Labels | None) -> Iterator[Labels]:
    """Within the block, :func:`name` and its kin read ``labels`` (``None`` keeps those in
    force, so a result without labels drawn inside a labelled block keeps the block's)."""
    if labels is None:
        yield _ACTIVE.get()
        return
    token = _ACTIVE.set(labels)
    try:
        yield labels
    finally:
        _ACTIVE.reset(token)


def activate(labels: Labels) -> None:
    """Put ``labels`` in force for the rest of the current context — for a front end that
    runs inside a :func:`using` block which restores the labels before it (each CLI command
    runs inside one, opened by ``sensiv.cli.app.guarded``)."""
    _ACTIVE.set(labels)


def active() -> Labels:
    """The labels in force (empty outside every :func:`using` block)."""
    return _ACTIVE.get()


def name(column: str) -> str:
    """The label of ``column`` in force, or the column's own name."""
    return _ACTIVE.get().get(column) or column


def leading(text: str, column: str | None = None) -> str:
    """``text`` that starts with the name ``column`` (such as a conclusion "educ effect > 0"),
    led by the column's label without its unit instead; ``None``: its first word."""
    column = text.split(" ", 1)[0] if column is None else column
    if text.startswith(column + " ") and _ACTIVE.get().get(column):
        return stem(column) + text[len(column):]
    return text


def split_unit(text: str) -> tuple[str, str | None]:
    """``"Maize yield (t/ha)"`` → ``("Maize yield", "t/ha")``; no trailing unit → ``None``."""
    found = _UNIT.match(text)
    if found is None:
        return text, None
    return found["stem"], found["unit"].strip()


def stem(column: str) -> str:
    """The label of ``column`` without its trailing unit (the column's name without a label)."""
    return split_unit(name(column))[0]


def unit(column: str) -> str | None:
    """The unit a label of ``column`` states, if any."""
    return split_unit(name(column))[1]


def singular(text: str) -> str:
    """A unit after "per": its last word in the singular (hours → hour; km stays km)."""
    head, _, last = text.rpartition(" ")
    word = last
    lower = word.lower()
    if len(word) > 3 and lower.endswith("ies"):
        word = word[:-3] + "y"
    elif len(word) > 3 and lower.endswith(_ES):
        word = word[:-2]
    elif len(word) > 2 and lower.endswith("s") and not lower.endswith(_KEEP_S) \
            and word[:-1].isalpha():
        word = word[:-1]
    return f"{head} {word}" if head else word


def effect_unit(outcome: str, treatment: str) -> str | None:
    """The unit of an effect of ``treatment`` on ``outcome`` from their labels: "t/ha per
    hour"; "t/ha per unit of Irrigation" without a treatment unit, "outcome units per hour"
    without an outcome unit, ``None`` with neither."""
    out, per = unit(outcome), unit(treatment)
    if out is None and per is None:
        return None
    return (f"{out or 'outcome units'} per "
            f"{singular(per) if per is not None else 'unit of ' + stem(treatment)}")


def direct_unit(outcome: str, instrument: str) -> str | None:
    """The unit of a direct effect of ``instrument`` on ``outcome``: the outcome's unit
    ("t/ha"), per the instrument's unit when its label states one ("t/ha per metre");
    ``None`` without an outcome unit."""
    out = unit(outcome)
    if out is None:
        return None
    per = unit(instrument)
    return f"{out} per {singular(per)}" if per is not None else out


def effect_words(treatment: str, outcome: str) -> str:
    """``"effect of Irrigation (hours) on Maize yield (t/ha)"`` from the labels in force."""
    return f"effect of {name(treatment)} on {name(outcome)}"


def axis_label(prefix: str, treatment: str, outcome: str) -> str:
    """An effect axis: ``"β, effect of Irrigation (t/ha per hour)"`` — the treatment's label
    without its unit and the effect's unit; just the name when no label states a unit."""
    unit_text = effect_unit(outcome, treatment)
    words = f"{prefix}effect of {stem(treatment) if unit_text else name(treatment)}"
    return f"{words} ({unit_text})" if unit_text else words


def document(doc: Mapping) -> dict:
    """A result's JSON document with the labels in force under ``labels`` ({column: text})."""
    return {**doc, "labels": _ACTIVE.get().to_dict()}
