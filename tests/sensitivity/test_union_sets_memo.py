"""The largest standard error over a scaled box, remembered within one sweep.

Sources beside each check (common practice, no source): inside ``remembering_se`` a repeated
request is answered without a second maximisation and with the very same number; a different
scale or core is computed anew; outside the block nothing is remembered; a whole sweep gives
the same JSON with and without the memory.
"""

from __future__ import annotations

import warnings

import numpy as np

from sensiv.core.errors import WeakInstrumentWarning
from sensiv.data import Spec, from_frame
from sensiv.sensitivity import bounds, union_sets
from sensiv.sensitivity.direct_sets import box_set

from test_bounds import design
from test_union_sets import random_box, random_core


def counting(monkeypatch):
    calls = []
    original = union_sets.maximise

    def wrapped(*args, **kwargs):
        calls.append(1)
        return original(*args, **kwargs)

    monkeypatch.setattr(union_sets, "maximise", wrapped)
    return calls


def test_repeats_are_remembered_inside_the_block_only(monkeypatch):
    rng = np.random.default_rng(11)
    core, other = random_core(rng, 15), random_core(rng, 15)
    dset = random_box(rng, core)
    calls = counting(monkeypatch)
    plain = [union_sets.largest_se_set([core], dset, t) for t in (0.5, 0.5, 1.0)]
    assert len(calls) == 3                                  # outside: no memory
    with union_sets.remembering_se():
        first = union_sets.largest_se_set([core], dset, 0.5)
        again = union_sets.largest_se_set([core], dset, 0.5)
        with union_sets.remembering_se():                   # nested: the same memory
            inner = union_sets.largest_se_set([core], dset, 0.5)
        assert len(calls) == 4
        union_sets.largest_se_set([core], dset, 1.0)
        union_sets.largest_se_set([other], dset, 0.5)
        assert len(calls) == 6
    assert first == again == inner == plain[0]
    union_sets.largest_se_set([core], dset, 0.5)
    assert len(calls) == 7                                  # forgotten on leaving


def test_sweep_is_the_same_without_the_memory(monkeypatch):
    frame = design(n=800, k_z=14, seed=5)
    spec = Spec(outcome="y", treatments=("x",), instruments=tuple(f"z{k + 1}" for k in range(14)),
                controls=("w",))

    def run():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", WeakInstrumentWarning)
            return bounds.sweep(from_frame(frame, spec), direct=["-0.05:0.05"] * 14,
                                se="robust", points=21, threshold=0.3).to_dict()

    calls = counting(monkeypatch)
    remembered = run()
    with_memory = len(calls)

    class Never:
        def get(self):
            return None

        def set(self, value):
            return None

        def reset(self, token):
            return None

    monkeypatch.setattr(union_sets, "_SE_MEMO", Never())
    forgotten = run()
    assert len(calls) - with_memory > with_memory        # the memory saved maximisations
    assert remembered == forgotten
