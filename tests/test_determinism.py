"""Determinism: the same sequence of calls gives bit-for-bit the same world (common practice for
game physics: replays and lockstep networking depend on it)."""

from __future__ import annotations

import hashlib

import numpy as np
from conftest import dims
from ndrigid.bench.scenes import build_pile


def _state_hash(sim) -> str:  # type: ignore[no-untyped-def]
    h = hashlib.sha256()
    for name in ("position", "rotor", "velocity", "angular_velocity", "awake"):
        h.update(np.ascontiguousarray(sim.bodies.column(name)).tobytes())
    return h.hexdigest()


@dims()
def test_same_calls_give_the_same_state_hash(dim: int) -> None:
    hashes = []
    for _ in range(2):
        sim, _warm = build_pile(dim, 24, seed=7)
        for _ in range(45):
            sim.step()
        hashes.append(_state_hash(sim))
        assert sim.contacts is not None and sim.contacts.count > 0  # the scene really collides
    assert hashes[0] == hashes[1]


# ---------------------------------------------------------------------------------------------
# across processes and BLAS thread counts, and against a recorded hash
# ---------------------------------------------------------------------------------------------

_HASH_SCRIPT = """
import hashlib, json, platform, sys
import numpy as np, numba
from threadpoolctl import threadpool_info
from ndrigid.bench.scenes import build_pile
out = {}
for dim in range(2, 7):
    sim, _ = build_pile(dim, 16, seed=11, boxes_only=dim == 6)
    for _ in range(1000):
        sim.step()
    h = hashlib.sha256()
    for name in ("position", "rotor", "velocity", "angular_velocity", "awake"):
        h.update(np.ascontiguousarray(sim.bodies.column(name)).tobytes())
    out[dim] = h.hexdigest()[:16]
blas = sorted({i.get("architecture", "?") for i in threadpool_info() if i.get("user_api") == "blas"})
out["platform"] = "/".join([platform.machine(), np.__version__, numba.__version__, *blas])
print(json.dumps(out))
"""

# Recorded on the development machine (x86_64, numpy 2.4.6, numba 0.68.1, OpenBLAS Haswell
# kernels) by the script above; a machine with another CPU family or other library builds may
# round differently (the guarantee is bit-for-bit replay on the same platform), so the recorded
# comparison runs where the platform string matches.
_RECORDED_PLATFORM = "x86_64/2.4.6/0.68.1/Haswell"
_RECORDED = {2: "b973008f271b8fc9", 3: "2ec65940fd28e0b8", 4: "1e883539aed766b0", 5: "d91c61d5845bc390",
             6: "7051fdc90b10413a"}


def _hashes(*threads: int) -> list[dict]:
    """The hashes of fresh processes, one per BLAS thread count, run side by side."""
    import json
    import os
    import subprocess
    import sys

    pipe = subprocess.PIPE
    procs = [subprocess.Popen([sys.executable, "-c", _HASH_SCRIPT], stdout=pipe, stderr=pipe, text=True,
                              env=dict(os.environ, OPENBLAS_NUM_THREADS=str(t), OMP_NUM_THREADS=str(t)))
             for t in threads]
    out = []
    for p in procs:
        stdout, stderr = p.communicate(timeout=900)
        assert p.returncode == 0, stderr
        out.append({k if k == "platform" else int(k): v for k, v in json.loads(stdout).items()})
    return out


def test_a_thousand_steps_hash_the_same_in_new_processes_with_any_blas_thread_count() -> None:
    """2-D to 6-D piles of 16 stepped 1,000 times in fresh processes with 1 and 4 BLAS threads:
    the same state hash in every dimension (the step pins BLAS to one thread; before, the 6-D
    numpy path depended on the thread count), and, on the platform it was recorded on, the
    recorded hash."""
    import pytest

    one, four = _hashes(1, 4)
    assert one == four
    if one["platform"] != _RECORDED_PLATFORM:
        pytest.skip(f"recorded hashes are for {_RECORDED_PLATFORM}, this is {one['platform']} "
                    f"(same-process and cross-thread equality checked above)")
    assert {d: one[d] for d in range(2, 7)} == _RECORDED
