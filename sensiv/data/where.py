"""Row filters: a small expression language, parsed by sensiv's own tokenizer and
recursive-descent parser into a frozen tree and evaluated column by column on a pandas frame.
Nothing is ever evaluated as Python or SQL.

Grammar (keywords in lower case; a column name that is not a plain identifier, or that is a
keyword, is written in backquotes, e.g. ```birth year` > 1960``)::

    filter     := disjunct ("or" disjunct)*
    disjunct   := negation ("and" negation)*
    negation   := "not" negation | "(" filter ")" | comparison
    comparison := column ("==" | "!=" | "<" | "<=" | ">" | ">=") literal
                | column ["not"] "in" "[" literal ("," literal)* "]"
                | column "is" ["not"] "missing"
    literal    := number | "text" | 'text' | true | false

A comparison with a missing value is false (also ``!=``), so ``not (age > 30)`` keeps rows
with a missing age; select or exclude them explicitly with ``is missing`` / ``is not missing``.
In text columns an empty string counts as missing, as everywhere in sensiv.

Examples
--------
>>> tree = parse_filter("age >= 18 and (region in ['north', 'east'] or not urban == true)")
>>> sorted(filter_columns(tree))
['age', 'region', 'urban']
>>> import pandas as pd
>>> frame = pd.DataFrame({"age": [17, 30, None], "region": ["north", "west", "east"],
...                       "urban": [True, False, False]})
>>> keep_mask(tree, frame).tolist()
[False, True, False]
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import TYPE_CHECKING, Union

import numpy as np

from sensiv.core.errors import InputError

if TYPE_CHECKING:
    import pandas as pd

Literal = Union[float, str, bool]

COMPARISONS = ("==", "!=", "<=", ">=", "<", ">")
ORDERED = ("<", "<=", ">", ">=")
KEYWORDS = ("and", "or", "not", "in", "is", "missing", "true", "false")

_TOKEN = re.compile(r"""
    (?P<space>\s+)
  | (?P<number>[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)
  | (?P<string>"(?:[^"\\]|\\.)*"|'(?:[^'\\]|\\.)*')
  | (?P<quoted>`[^`]+`)
  | (?P<name>[A-Za-z_][A-Za-z0-9_.]*)
  | (?P<op>==|!=|<=|>=|<|>|\(|\)|\[|\]|,)
""", re.VERBOSE)


@dataclass(frozen=True, slots=True)
class Token:
    """One token: ``kind`` is number, string, name, keyword, op or end; ``position`` is the
    1-based character where it starts."""

    kind: str
    text: str
    position: int


@dataclass(frozen=True, slots=True)
class Compare:
    """``column op value``."""

    column: str
    op: str
    value: Literal


@dataclass(frozen=True, slots=True)
class Member:
    """``column in [values]`` (``negated``: ``not in``)."""

    column: str
    values: tuple[Literal, ...]
    negated: bool = False


@dataclass(frozen=True, slots=True)
class Missing:
    """``column is missing`` (``negated``: ``is not missing``)."""

    column: str
    negated: bool = False


@dataclass(frozen=True, slots=True)
class Not:
    operand: Node


@dataclass(frozen=True, slots=True)
class Both:
    """``left and right``."""

    left: Node
    right: Node


@dataclass(frozen=True, slots=True)
class Either:
    """``left or right``."""

    left: Node
    right: Node


Node = Union[Compare, Member, Missing, Not, Both, Either]


def _fail(text: str, position: int, problem: str) -> InputError:
    pointer = f"at character {position}" if position <= len(text) else "at the end"
    return InputError(
        f"row filter {text!r} has a syntax error {pointer}: {problem}; write comparisons of a "
        "column with a value joined by and / or / not, e.g. \"age >= 18 and region in "
        "['north', 'east']\" (text in quotes, column names with spaces in `backquotes`)"
    )


def tokenize(text: str) -> list[Token]:
    """The tokens of ``text``, ending with an ``end`` token; InputError at a bad character."""
    tokens, at = [], 0
    while at < len(text):
        match = _TOKEN.match(text, at)
        if match is None:
            raise _fail(text, at + 1, f"unexpected character {text[at]!r}")
        kind, value = match.lastgroup or "", match.group()
        if kind == "name" and value in KEYWORDS:
            kind = "keyword"
        if kind == "quoted":
            kind, value = "name", value[1:-1]
        if kind != "space":
            tokens.append(Token(kind, value, at + 1))
        at = match.end()
    tokens.append(Token("end", "", len(text) + 1))
    return tokens


class _Parser:
    def __init__(self, text: str) -> None:
        self.text = text
        self.tokens = tokenize(text)
        self.at = 0

    @property
    def token(self) -> Token:
        return self.tokens[self.at]

    def error(self, problem: str, token: Token | None = None) -> InputError:
        token = token or self.token
        found = "the end of the filter" if token.kind == "end" else repr(token.text)
        return _fail(self.text, token.position, f"{problem}, found {found}")

    def accept(self, kind: str, text: str | None = None) -> Token | None:
        token = self.token
        if token.kind == kind and (text is None or token.text == text):
            self.at += 1
            return token
        return None

    def expect(self, kind: str, text: str, problem: str) -> Token:
        token = self.accept(kind, text)
        if token is None:
            raise self.error(problem)
        return token

    def filter(self) -> Node:
        node = self.disjunct()
        while self.accept("keyword", "or"):
            node = Either(node, self.disjunct())
        return node

    def disjunct(self) -> Node:
        node = self.negation()
        while self.accept("keyword", "and"):
            node = Both(node, self.negation())
        return node

    def negation(self) -> Node:
        if self.accept("keyword", "not"):
            return Not(self.negation())
        if self.accept("op", "("):
            node = self.filter()
            self.expect("op", ")", "expected ')' to close the parenthesis")
            return node
        return self.comparison()

    def comparison(self) -> Node:
        column = self.accept("name")
        if column is None:
            raise self.error("expected a column name, 'not' or '('")
        if self.accept("keyword", "is"):
            negated = self.accept("keyword", "not") is not None
            self.expect("keyword", "missing", "expected 'missing' after 'is'")
            return Missing(column.text, negated)
        if self.accept("keyword", "not"):
            self.expect("keyword", "in", "expected 'in' after 'not'")
            return Member(column.text, self.members(), True)
        if self.accept("keyword", "in"):
            return Member(column.text, self.members())
        op = self.token
        if op.kind != "op" or op.text not in COMPARISONS:
            raise self.error(f"expected a comparison (==, !=, <, <=, >, >=), 'in' or 'is' "
                             f"after column {column.text!r}")
        self.at += 1
        return Compare(column.text, op.text, self.literal(f"after {op.text!r}"))

    def members(self) -> tuple[Literal, ...]:
        self.expect("op", "[", "expected '[' to open the list after 'in'")
        values = [self.literal("in the list")]
        while self.accept("op", ","):
            values.append(self.literal("in the list"))
        self.expect("op", "]", "expected ',' or ']' in the list")
        return tuple(values)

    def literal(self, where: str) -> Literal:
        token = self.token
        self.at += 1
        if token.kind == "number":
            return float(token.text)
        if token.kind == "string":
            return re.sub(r"\\(.)", r"\1", token.text[1:-1])
        if token.kind == "keyword" and token.text in ("true", "false"):
            return token.text == "true"
        self.at -= 1
        raise self.error(f"expected a number, a quoted text or true/false {where}")


def parse_filter(text: str) -> Node:
    """Parse a row filter into its tree; InputError naming the character of a syntax error."""
    if not isinstance(text, str) or not text.strip():
        raise InputError(f"row filter must be a non-empty expression such as \"age >= 18\"; "
                         f"got {text!r}")
    parser = _Parser(text)
    node = parser.filter()
    if parser.token.kind != "end":
        raise parser.error("expected 'and', 'or' or the end of the filter")
    return node


def column_term(name: str) -> str:
    """A column name as a filter writes it: plain, or in backquotes when it is not a plain
    identifier or is a keyword.

    >>> column_term("age"), column_term("birth year"), column_term("in")
    ('age', '`birth year`', '`in`')
    """
    if "`" in name:
        raise InputError(f"column {name!r} has a backquote in its name, which a row filter "
                         "cannot write; rename the column")
    plain = re.fullmatch(r"[A-Za-z_][A-Za-z0-9_.]*", name) and name not in KEYWORDS
    return name if plain else f"`{name}`"


def leaves(node: Node) -> list[Compare | Member | Missing]:
    """The comparisons of a tree, left to right."""
    if isinstance(node, Not):
        return leaves(node.operand)
    if isinstance(node, (Both, Either)):
        return leaves(node.left) + leaves(node.right)
    return [node]


def filter_columns(node: Node) -> list[str]:
    """The columns a filter reads, in order of first use."""
    return list(dict.fromkeys(leaf.column for leaf in leaves(node)))


def _literal_kind(value: Literal) -> str:
    return "text" if isinstance(value, str) else "numeric"


def check_kinds(node: Node, kinds: dict[str, str], text: str, description: str) -> None:
    """InputError when a comparison does not fit its column's kind (``"numeric"`` / ``"text"``
    / other): text compared with a number (or the reverse), or ``<`` on text."""
    for leaf in leaves(node):
        kind = kinds[leaf.column]
        if isinstance(leaf, Missing):
            continue
        values = leaf.values if isinstance(leaf, Member) else (leaf.value,)
        shown = render(leaf)
        what = f"row filter {text!r}: column {leaf.column!r} in {description}"
        if kind not in ("numeric", "text"):
            raise InputError(f"{what} is neither numbers nor text, so it cannot be compared "
                             f"({shown}); filter on a numeric or text column")
        bad = [v for v in values if _literal_kind(v) != kind]
        if bad:
            wanted = "quoted text, e.g. 'north'" if kind == "text" else "a number or true/false"
            raise InputError(f"{what} holds {kind} values but is compared with "
                             f"{show(bad[0])} ({shown}); compare it with {wanted}")
        if kind == "text" and isinstance(leaf, Compare) and leaf.op in ORDERED:
            raise InputError(f"{what} holds text, which has no order ({shown}); use == , != "
                             "or in [...] with text columns")


def _column_values(series: pd.Series, kind: str) -> tuple[np.ndarray, np.ndarray]:
    """``(values, missing)``: floats (NaN for missing) or Python strings."""
    if kind == "numeric":
        if _kind(series) != "numeric":  # e.g. a cluster column read as text labels
            import pandas as pd

            series = pd.to_numeric(series, errors="coerce")
        values = series.to_numpy(dtype=np.float64, na_value=np.nan)
        return values, np.isnan(values)
    missing = np.array(series.isna(), dtype=bool)
    values = series.astype(object).to_numpy()
    missing |= np.array([v == "" for v in values], dtype=bool) if len(values) else missing
    values = np.where(missing, "", values.astype(str)).astype(object)
    return values, missing


def _as_value(value: Literal, kind: str) -> Literal:
    return float(value) if kind == "numeric" else value


def _kind(series: pd.Series) -> str:
    import pandas as pd

    api = pd.api.types
    if api.is_bool_dtype(series.dtype) or (api.is_numeric_dtype(series.dtype)
                                           and not api.is_complex_dtype(series.dtype)):
        return "numeric"
    return "text"


def _leaf_mask(leaf: Compare | Member | Missing, frame: pd.DataFrame,
               kinds: dict[str, str] | None) -> np.ndarray:
    series = frame[leaf.column]
    kind = kinds[leaf.column] if kinds is not None else _kind(series)
    values, missing = _column_values(series, kind)
    if isinstance(leaf, Missing):
        return ~missing if leaf.negated else missing
    if isinstance(leaf, Member):
        wanted = [_as_value(v, kind) for v in leaf.values]
        hit = np.isin(values, np.array(wanted, dtype=values.dtype))
        return ~missing & (~hit if leaf.negated else hit)
    value = _as_value(leaf.value, kind)
    with np.errstate(invalid="ignore"):
        result = {"==": lambda: values == value, "!=": lambda: values != value,
                  "<": lambda: values < value, "<=": lambda: values <= value,
                  ">": lambda: values > value, ">=": lambda: values >= value}[leaf.op]()
    return ~missing & np.asarray(result, dtype=bool)


def keep_mask(node: Node, frame: pd.DataFrame,
              kinds: dict[str, str] | None = None) -> np.ndarray:
    """Boolean mask of the rows of ``frame`` the filter keeps (column by column, no eval).

    ``kinds`` maps each filter column to ``"numeric"`` or ``"text"`` (as checked by
    :func:`check_kinds`); by default it is read from the frame's dtypes.
    """
    if isinstance(node, Not):
        return ~keep_mask(node.operand, frame, kinds)
    if isinstance(node, Both):
        return keep_mask(node.left, frame, kinds) & keep_mask(node.right, frame, kinds)
    if isinstance(node, Either):
        return keep_mask(node.left, frame, kinds) | keep_mask(node.right, frame, kinds)
    return _leaf_mask(node, frame, kinds)


def show(value: Literal) -> str:
    """A literal as it is written in a filter."""
    if isinstance(value, bool):
        return "true" if value else "false"
    return repr(value) if isinstance(value, str) else f"{value:.15g}"


def render(node: Node) -> str:
    """The filter written back as text in a canonical form (for reports), which parses back
    to the same tree (a column that is not a plain identifier in backquotes)."""
    if isinstance(node, Not):
        return f"not ({render(node.operand)})"
    if isinstance(node, (Both, Either)):
        word = "and" if isinstance(node, Both) else "or"
        return f"({render(node.left)} {word} {render(node.right)})"
    plain = re.fullmatch(r"[A-Za-z_][A-Za-z0-9_.]*", node.column) and node.column not in KEYWORDS
    name = node.column if plain else f"`{node.column}`"
    if isinstance(node, Missing):
        return f"{name} is {'not ' if node.negated else ''}missing"
    if isinstance(node, Member):
        listed = ", ".join(show(v) for v in node.values)
        return f"{name} {'not in' if node.negated else 'in'} [{listed}]"
    return f"{name} {node.op} {show(node.value)}"


def filter_assumptions(where: str | None, n_filtered: int) -> list[str]:
    """The assumption line of a row filter (empty without one)."""
    return [] if where is None else [
        f"sample restricted by the row filter {where!r} ({n_filtered} rows filtered out); the "
        "results describe that subpopulation only"]
