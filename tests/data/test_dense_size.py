"""Memory of the in-memory path and the up-front refusal of a design too large for memory.

Common practice, no source: data are validated in chunks and one float64 copy of the used
columns is kept; a design that cannot fit is refused before any row is converted, with exit
code 2 and a message that names the wide control and the way out (absorbing it).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from sensiv.cli.app import app
from sensiv.core.errors import InputError
from sensiv.core.memory import available_memory, format_bytes
from sensiv.data import Spec, from_frame
from sensiv.data import dense_size
from sensiv.data.readers import FRAME_CHUNK_ROWS
from sensiv.estimation import iv


def _frame(n: int, levels: int = 300, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    z = rng.normal(size=n)
    x = 0.7 * z + rng.normal(size=n)
    return pd.DataFrame({"y": 0.5 * x + rng.normal(size=n), "x": x, "z": z,
                         "w": rng.normal(size=n), "firm": rng.integers(0, levels, n)})


SPEC = Spec(outcome="y", treatments=("x",), instruments=("z",), controls=("w", "firm"),
            categorical=("firm",))


def test_available_memory_is_a_positive_byte_count_here():
    found = available_memory()
    assert found is None or found > 0
    assert format_bytes(37.3 * 2**30) == "37.3 GiB" and format_bytes(512) == "512 bytes"


def test_a_design_too_large_is_refused_before_conversion(monkeypatch):
    monkeypatch.setattr(dense_size, "available_memory", lambda: 1 << 20)   # 1 MiB
    with pytest.raises(InputError) as caught:
        from_frame(_frame(2_000), SPEC)
    message = str(caught.value)
    narrow = from_frame(_frame(2_000), Spec(outcome="y", treatments=("x",), instruments=("z",),
                                            controls=("w",)))   # without 'firm' it fits
    assert narrow.layout.columns and f"'firm' with {_frame(2_000)['firm'].nunique() - 1} indicator" \
        in message
    assert "--absorb" in message and "MiB of memory available" in message


def test_the_cli_refuses_it_with_exit_2_and_no_traceback(tmp_path, monkeypatch):
    path = tmp_path / "wide.csv"
    _frame(2_000).to_csv(path, index=False)
    monkeypatch.setattr(dense_size, "available_memory", lambda: 1 << 20)
    done = CliRunner().invoke(app, ["fit", str(path), "--outcome", "y", "--treatment", "x",
                                    "--instrument", "z", "--control", "w", "--control",
                                    "firm", "--categorical", "firm"])
    assert done.exit_code == 2, done.output
    assert "indicator columns" in done.output and "Traceback" not in done.output


def test_unknown_memory_skips_the_check(monkeypatch):
    monkeypatch.setattr(dense_size, "available_memory", lambda: None)
    assert from_frame(_frame(500, levels=20), SPEC).layout.columns


def test_frames_are_validated_in_chunks_with_the_same_answer():
    # Chunking changes only the order of additions: the fit agrees with one whole-frame
    # chunk to rounding (common practice, no source).
    frame = _frame(FRAME_CHUNK_ROWS + 1_234, levels=5)
    chunked = from_frame(frame, SPEC)
    whole = from_frame(frame, SPEC, chunk_rows=len(frame))
    assert len(list(chunked.chunks())) == 2 and len(list(whole.chunks())) == 1
    a, b = iv.fit(chunked, se="robust"), iv.fit(whole, se="robust")
    np.testing.assert_allclose(a.tsls.estimate, b.tsls.estimate, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(a.tsls.se, b.tsls.se, rtol=1e-10)


def test_an_infinite_value_is_still_named_with_its_row():
    frame = _frame(300, levels=5)
    frame.loc[123, "w"] = np.inf
    with pytest.raises(InputError, match=r"control 'w' .* 1 infinite value\(s\) \(first at data "
                                         r"row 124\)"):
        from_frame(frame, SPEC)
