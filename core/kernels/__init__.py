"""Compiled kernels: the hot loops of a step as numba functions, one module per dimension.

How it works
------------
* Each kernel family is a *template* module in this folder (``solver_tpl.py``, ...): plain Python
  loops over rows, bodies or pairs that read the dimension's constants (``N``, ``K``, the bivector
  pair table, ...) as module globals. :func:`load` writes the template once per dimension into the
  cache folder with those constants filled in from :class:`~ndrigid.core.algebra.Algebra`, imports
  it and lets numba compile it with ``cache=True``. numba freezes the globals as compile-time
  constants, so every loop over a vector or bivector has a fixed trip count (per-dimension kernels
  measured 3.5x faster than table-driven generic ones: ../shared/methods.md).
* The cache folder is keyed by the package version, the numba version and a hash of every template
  source, so an upgrade or an edit never runs stale machine code (numba's own cache checks only
  the time stamp of the file that holds a function, not of helpers it inlined from elsewhere).
* The compiled path is on by default. It is off where numba cannot be imported, where the
  environment variable ``NDRIGID_KERNELS=numpy`` is set, or for one simulation with
  ``Settings(compiled=False)``; the vectorised numpy path then runs, and a missing numba is reported
  once with a warning.
* The first load of a dimension with a cold cache compiles (seconds per family) and says so on
  stderr in one line; ``python -m ndrigid.compile --dim 2 3 4 5`` does it ahead of time.

Both paths compute the same things in the same row order; they differ in the last bits where the
summation order differs (numpy's pairwise sums and BLAS against serial loops).
"""

from __future__ import annotations

import hashlib
import importlib.util
import os
import sys
import threading
import warnings
from collections.abc import Callable, Iterable
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np

ENV_SWITCH = "NDRIGID_KERNELS"
ENV_CACHE = "NDRIGID_CACHE_DIR"
_HERE = Path(__file__).resolve().parent

_lock = threading.RLock()
_loaded: dict[tuple[str, int], ModuleType] = {}
_numba: Any = None
_numba_checked = False
_warned = False


def _import_numba() -> Any:
    global _numba, _numba_checked
    if not _numba_checked:
        _numba_checked = True
        try:
            import numba

            _numba = numba
        except Exception:  # ImportError, or a numba that fails to load against this numpy
            _numba = None
    return _numba


def switched_off_by_env() -> bool:
    """True when ``NDRIGID_KERNELS`` asks for the numpy path."""
    return os.environ.get(ENV_SWITCH, "").strip().lower() in ("numpy", "0", "off", "no", "false")


def available() -> bool:
    """True when the compiled path can run (numba imports and the environment does not forbid it).

    The first call that finds numba missing warns once; the numpy path then runs everywhere.
    """
    global _warned
    if switched_off_by_env():
        return False
    if _import_numba() is None:
        if not _warned:
            _warned = True
            warnings.warn("ndrigid: numba is not installed (or failed to import); running the "
                          "vectorised numpy path, several times slower. Install numba for the "
                          "compiled path.", RuntimeWarning, stacklevel=2)
        return False
    return True


def use_compiled(settings: Any) -> bool:
    """Whether a simulation with these settings runs the compiled kernels."""
    return bool(getattr(settings, "compiled", True)) and available()


def _version() -> str:
    try:
        from importlib.metadata import version

        return version("ndrigid")
    except Exception:
        return "0+unknown"


def template_path(family: str) -> Path:
    return _HERE / f"{family}_tpl.py"


def cache_key(version: str | None = None) -> str:
    """Folder name of this build's cache: package version, numba version, hash of the templates."""
    h = hashlib.sha256()
    for f in sorted(_HERE.glob("*_tpl.py")):
        h.update(f.name.encode())
        h.update(f.read_bytes())
    nb = _import_numba()
    nbv = getattr(nb, "__version__", "none")
    v = _version() if version is None else version
    return f"{v}-numba{nbv}-np{np.__version__}-{h.hexdigest()[:12]}"


def cache_root() -> Path:
    """Where generated kernel modules and numba's cache live (``NDRIGID_CACHE_DIR`` overrides)."""
    env = os.environ.get(ENV_CACHE)
    if env:
        return Path(env)
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "ndrigid" / "kernels"


def cache_dir(version: str | None = None) -> Path:
    return cache_root() / cache_key(version)


def _constants(n: int) -> str:
    """The generated header: the dimension's constants as module globals."""
    from ..algebra import Algebra

    alg = Algebra(n)
    pairs = [tuple(int(v) for v in p) for p in alg.pairs]
    lines = [
        f"N = {n}",
        f"K = {alg.k}",
        f"E = {alg.even_size}",
        f"Q = {len(alg.quadvector_index)}",
        f"PAIRS = np.array({pairs!r}, dtype=np.int64).reshape({alg.k}, 2)",
        f"EVEN_BIV = np.array({[int(v) for v in alg._even_biv]!r}, dtype=np.int64)",
        f"EVEN_QUAD = np.array({[int(v) for v in alg._even_quad]!r}, dtype=np.int64)",
        f"EVEN_REV = np.array({[float(v) for v in alg._even_reverse]!r})",
    ]
    # product tables of the algebra as sparse triplets: out[C] += x[A] * y[B] * V
    E, k, q = alg.even_size, alg.k, len(alg.quadvector_index)
    tables = {"T_EVEN": (alg._t_even, E, E), "T_ROT": (alg._t_rot, E, E), "T_C2": (alg._t_c2, E, E),
              "T_COMM": (alg._t_comm, k, k), "T_EB": (alg._t_eb, E, k), "T_EEB": (alg._t_eeb, E, E),
              "T_BB4": (alg._t_bb4, k, k), "T_B4B": (alg._t_b4b, k, q)}
    for name, (T, P, Qn) in tables.items():
        T = np.asarray(T).reshape(P, Qn, -1) if P * Qn else np.zeros((0, 0, 0))
        ia, ib, ic = np.nonzero(T) if T.size else (np.zeros(0, int),) * 3
        vals = T[ia, ib, ic] if T.size else np.zeros(0)
        for suffix, arr, dt in (("A", ia, "np.int64"), ("B", ib, "np.int64"), ("C", ic, "np.int64"),
                                ("V", vals, "np.float64")):
            items = [float(v) for v in arr] if suffix == "V" else [int(v) for v in arr]
            lines.append(f"{name}_{suffix} = np.array({items!r}, dtype={dt})")
    # the same products as straight-line functions (no index tables at run time: measured 2-3x
    # faster than the triplet loops in the integrator, 4-D)
    lines.append("")
    lines.append("")
    for name, (T, P, Qn) in tables.items():
        if name != "T_C2":  # 1,600 terms in 5-D (compiles for minutes); kernels take the minors of a matrix
            lines += _straight_bilinear(f"g_{name[2:].lower()}", np.asarray(T), P, Qn)
    return "\n".join(lines) + "\n"


def _straight_bilinear(name: str, T: Any, P: int, Qn: int) -> list[str]:
    """Source of ``@njit def name(x, y, out)``: out[c] = sum_ab x[a] y[b] T[a Q + b, c], unrolled."""
    out = ["@njit(cache=True)", f"def {name}(x, y, out):"]
    C = T.shape[1] if T.ndim == 2 else 0
    T3 = T.reshape(P, Qn, C) if P * Qn * C else np.zeros((P, Qn, C))
    if C == 0:
        out.append("    return")
    for c in range(C):
        terms = []
        for a in range(P):
            for b in range(Qn):
                v = float(T3[a, b, c])
                if v == 0.0:
                    continue
                if v == 1.0:
                    terms.append(f"+ x[{a}] * y[{b}]")
                elif v == -1.0:
                    terms.append(f"- x[{a}] * y[{b}]")
                else:
                    terms.append(f"+ {v!r} * x[{a}] * y[{b}]")
        expr = " ".join(terms) if terms else "0.0"
        if expr.startswith("+ "):
            expr = expr[2:]
        elif expr.startswith("- "):
            expr = "-" + expr[2:]
        out.append(f"    out[{c}] = {expr}")
    out.append("")
    out.append("")
    return out


def _generate(family: str, n: int, folder: Path) -> Path:
    src = template_path(family).read_text()
    marker = "# --- constants of the dimension (generated) ---"
    if marker not in src:
        raise RuntimeError(f"kernel template {family}_tpl.py lacks the constants marker")
    head, _, tail = src.partition(marker)
    tail = tail.split("\n", 1)[1] if "\n" in tail else ""
    # the template's own placeholder block ends at the next blank line
    _, _, rest = tail.partition("\n\n")
    text = f"{head}{marker}\n{_constants(n)}\n{rest}"
    path = folder / f"{family}_n{n}.py"
    if not path.exists() or path.read_text() != text:
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(text)
        os.replace(tmp, path)
    return path


def is_warm(family: str, n: int) -> bool:
    """True when this family's kernels for dimension n are in the cache already."""
    return (cache_dir() / f"{family}_n{n}.ok").exists()


def load(family: str, n: int, quiet: bool = False) -> ModuleType:
    """The compiled module of one kernel family for dimension n (generated and compiled on first use)."""
    key = (family, n)
    mod = _loaded.get(key)
    if mod is not None:
        return mod
    with _lock:
        mod = _loaded.get(key)
        if mod is not None:
            return mod
        if not available():
            raise RuntimeError("ndrigid: the compiled kernels are not available (see kernels.available)")
        folder = cache_dir()
        folder.mkdir(parents=True, exist_ok=True)
        path = _generate(family, n, folder)
        ok = folder / f"{family}_n{n}.ok"
        if not ok.exists() and not quiet:
            print(f"ndrigid: compiling {n}-D {family} kernels, first run only", file=sys.stderr, flush=True)
        name = f"ndrigid_kernels_{family}_n{n}"
        spec = importlib.util.spec_from_file_location(name, path)
        assert spec is not None and spec.loader is not None
        mod = importlib.util.module_from_spec(spec)
        sys.modules[name] = mod
        spec.loader.exec_module(mod)
        warm = getattr(mod, "warm_up", None)
        if warm is not None:
            warm()  # compile every specialisation now (numba compiles lazily otherwise)
        ok.touch()
        _loaded[key] = mod
        return mod


def all_families() -> tuple[str, ...]:
    """Every kernel family that has a template in this folder."""
    return tuple(sorted(p.name[: -len("_tpl.py")] for p in _HERE.glob("*_tpl.py")))


def precompile(dims: Iterable[int], families: Iterable[str] | None = None,
               progress: Callable[[str, int, int, int], None] | None = None) -> dict[tuple[str, int], float]:
    """Compile and cache the kernels of every family for each dimension; returns seconds per item.

    ``progress(family, n, done, total)`` is called after each item.
    """
    import time

    fams = tuple(families) if families is not None else all_families()
    todo = [(f, int(n)) for n in dims for f in fams]
    out: dict[tuple[str, int], float] = {}
    for i, (f, n) in enumerate(todo):
        t0 = time.perf_counter()
        load(f, n, quiet=True)
        out[(f, n)] = time.perf_counter() - t0
        if progress is not None:
            progress(f, n, i + 1, len(todo))
    return out


__all__ = ["ENV_CACHE", "ENV_SWITCH", "all_families", "available", "cache_dir", "cache_key", "cache_root",
           "is_warm", "load", "precompile", "switched_off_by_env", "use_compiled"]
