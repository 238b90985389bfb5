"""The per-instrument branch of ``sensiv published`` (``--per-instrument TABLE``) and the
parsing of the options that are numbers in single mode and column names with a table.

Not a command of its own: :mod:`sensiv.cli.published` calls :func:`run_table` when
``--per-instrument`` is given and :func:`number` for the printed numbers otherwise.
"""

from __future__ import annotations


from pathlib import Path
from typing import Optional

try:  # typer ≥ 0.20 vendors click (the same switch as sensiv.cli.app)
    from typer._click import exceptions as click_errors
    from typer._click.globals import get_current_context
except ImportError:  # pragma: no cover
    from click import exceptions as click_errors
    from click.globals import get_current_context

from sensiv.cli.options import emit, write_outputs
from sensiv.core.errors import InputError

NOT_A_NUMBER = "Input should be a valid number, unable to parse string as a number"
"""The message of a printed number that does not parse (the same as the option parser's)."""


def number(text: Optional[str], option: str) -> Optional[float]:
    """``text`` as a float, or the option parser's usage error naming ``option``."""
    if text is None:
        return None
    try:
        if "_" in text:
            raise ValueError(text)
        return float(text)
    except ValueError:
        raise click_errors.BadParameter(NOT_A_NUMBER, ctx=get_current_context(),
                                 param_hint=f"'{option}'") from None


def missing(option: str) -> click_errors.UsageError:
    """The option parser's error for a required option left out."""
    return click_errors.UsageError(f"Missing option '{option}'.", ctx=get_current_context())


def refuse_single_only(given: dict) -> None:
    """Refuse the single-instrument options when a table is given."""
    used = [option for option, value in given.items() if value is not None]
    if used:
        raise InputError(f"{', '.join(used)} describe one printed estimate and do not apply "
                         "with --per-instrument (the table gives every instrument's "
                         "associations); leave them out or drop --per-instrument")


def refuse_table_only(given: dict) -> None:
    """Refuse the per-instrument options without a table."""
    used = [option for option, value in given.items() if value is not None]
    if used:
        raise InputError(f"{', '.join(used)} apply only with --per-instrument TABLE; give a "
                         "per-instrument table or leave them out")


def run_table(table: Path, columns: dict, name: Optional[str], *, weights: Optional[str],
              reps: Optional[int], seed: Optional[int], level: float, direct, prior,
              threshold: float, points: int, as_json: bool, out: Optional[Path],
              formats: tuple[str, ...], polytope: Optional[Path] = None,
              mode_bandwidth: Optional[float] = None) -> None:
    """Run the per-instrument analysis and print or write it."""
    from sensiv.analyses import per_instrument
    from sensiv.present.text_published_table import per_instrument_markdown
    from sensiv.present.writer import to_json
    from sensiv.sensitivity.kernel_mode import check_bandwidth
    from sensiv.sensitivity.robust_estimators import DEFAULT_REPS

    lacking = [f"--{r.replace('_', '-')}" for r, c in columns.items() if c is None]
    if lacking:
        raise InputError(f"--per-instrument needs the column of each role; name "
                         f"{', '.join(lacking)} (column names of the table)")
    phi = check_bandwidth(mode_bandwidth, "--mode-bandwidth")
    result = per_instrument.analyse(
        table, columns, name, weights=weights or "first", confidence_level=level,
        reps=DEFAULT_REPS if reps is None else reps, seed=seed, require_egger=True,
        direct=direct, prior=prior, threshold=threshold, points=points, phi=phi,
        polytope=None if polytope is None else str(polytope))
    document = result.to_dict()
    if out is not None:
        write_outputs(out, result, {"per_instrument.json": to_json(document),
                                    "per_instrument.md": per_instrument_markdown(result)},
                      formats)
    emit(document, str(result), as_json)



