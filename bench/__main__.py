"""``python -m ndrigid.bench``: time named scenes, per stage, in any dimension.

Examples::

    python -m ndrigid.bench pile --dim 4 --bodies 300 --steps 100
    python -m ndrigid.bench pile --dim 4 --bodies 300 --compare      # vectorised vs scalar path
    python -m ndrigid.bench pyramid --dim 2 --bodies 100             # base 100: 5,050 boxes
    python -m ndrigid.bench spin broadphase boxes --dim 4 --bodies 10000 --json out.json
    python -m ndrigid.bench pile --dim 4 --kernels numpy compiled      # both paths, one table
    python -m ndrigid.bench demo-rockfall --dim 5 --bodies 18          # a demo scene, as the demo builds it
    python -m ndrigid.bench --micro                                    # algebra/shape/... micro-benchmarks
    python -m ndrigid.bench --plot docs/step_time.png                  # step time vs bodies, 2-D..5-D

Timings are medians over the timed steps on one core (the harness pins BLAS to one thread before
numpy loads). Nothing here asserts a speed; the README's performance section quotes this output.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from typing import Any

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402

from .scenes import KEPT_STAGES, SCENES, TIMED_STAGES  # noqa: E402

KERNEL_PATHS = ("compiled", "numpy")


def _peak_rss_mb() -> float:
    try:
        import resource

        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    except Exception:  # pragma: no cover - non-POSIX
        return float("nan")


def run_scene(scene: str, dim: int, bodies: int, steps: int, seed: int = 0,
              reference: bool = False, kernels: str = "compiled") -> dict[str, Any]:
    """Build a scene, settle it, time ``steps`` steps; return one JSON-ready record.

    ``kernels``: "compiled" (numba kernels where they exist, the default of ``Settings``) or
    "numpy" (the vectorised numpy path everywhere).
    """
    if scene not in SCENES:
        raise SystemExit(f"scene: expected one of {sorted(SCENES)}, got {scene!r}")
    if kernels not in KERNEL_PATHS:
        raise SystemExit(f"kernels: expected one of {KERNEL_PATHS}, got {kernels!r}")
    sim, warmup = SCENES[scene](dim, bodies, seed)
    compiled = kernels == "compiled"
    if compiled:
        from ndrigid.core import kernels as _k

        if not _k.available():
            raise SystemExit("--kernels compiled: numba is not available (or NDRIGID_KERNELS=numpy is set)")
    sim.with_settings(compiled=compiled)
    timed = TIMED_STAGES[scene]
    keep = KEPT_STAGES[scene]
    if keep is not None:
        # run only the stages the scene measures, plus what keeps the bodies moving
        sim.stages = [(name, fn) for name, fn in sim.stages if name in keep]
    for _ in range(warmup):
        sim.step()
    if reference:
        # the scene settles on the vectorised path (the same state either way, much faster); the
        # timed steps then run the scalar reference stages
        from ndrigid.core.reference import use_reference_stages

        use_reference_stages(sim)
    step_ms: list[float] = []
    stage_ms: dict[str, list[float]] = {name: [] for name, _ in sim.stages}
    contacts: list[int] = []
    max_depth = 0.0
    for _ in range(steps):
        t0 = time.perf_counter()
        sim.step()
        dt = time.perf_counter() - t0
        if timed is None:
            step_ms.append(dt * 1e3)
        else:
            step_ms.append(sum(sim.timings.stages.get(s, 0.0) for s in timed) * 1e3)
        for name, sec in sim.timings.stages.items():
            stage_ms[name].append(sec * 1e3)
        c = sim.contacts
        if c is not None and c.count:
            contacts.append(int(c.count))
            max_depth = max(max_depth, float(np.max(c.depth)))
        else:
            contacts.append(0)
    return {
        "scene": scene,
        "dim": dim,
        "bodies": int(sim.count),
        "steps": steps,
        "path": "reference" if reference else kernels,
        "median_step_ms": float(np.median(step_ms)),
        "p90_step_ms": float(np.percentile(step_ms, 90)),
        "stage_ms": {k: float(np.median(v)) for k, v in stage_ms.items() if v},
        "contacts": int(np.median(contacts)) if contacts else 0,
        "max_depth": max_depth,
        "peak_rss_mb": _peak_rss_mb(),
        "bytes_per_body": sim.bodies.nbytes_per_row(),
    }


def _print_table(rows: list[dict[str, Any]]) -> None:
    head = f"{'scene':<15}{'path':<11}{'dim':>4}{'bodies':>8}{'steps':>6}{'median ms':>11}{'p90 ms':>9}" \
           f"{'contacts':>9}{'max depth':>10}  stages (median ms)"
    print(head)
    print("-" * len(head))
    for r in rows:
        stages = ", ".join(f"{k} {v:.2f}" for k, v in r["stage_ms"].items())
        print(f"{r['scene']:<15}{r['path']:<11}{r['dim']:>4}{r['bodies']:>8}{r['steps']:>6}"
              f"{r['median_step_ms']:>11.3f}{r['p90_step_ms']:>9.3f}{r['contacts']:>9}"
              f"{r['max_depth']:>10.4f}  {stages}")


def _kernels() -> list[dict[str, Any]]:
    """Micro-benchmarks of the kernels (each module's own bench function, where present)."""
    rows: list[dict[str, Any]] = []
    import importlib

    for mod, fn in (("algebra", "run_algebra_bench"), ("shapes", "run_shape_bench"),
                    ("collision", "run_broadphase_bench"), ("narrowphase", "run_boxbox_bench"),
                    ("solver", "run_solver_bench"), ("slicing", "run_slicing_bench"),
                    ("adapters", "run_adapter_bench"), ("integrate", "run_integrate_bench")):
        try:
            m = importlib.import_module(f"ndrigid.bench.{mod}")
        except ImportError:
            continue
        f = getattr(m, fn, None)
        if f is None:
            continue
        out = f()
        for r in out if isinstance(out, list) else [out]:
            rows.append({"kernel": f"{mod}.{fn}", **r})
    return rows


def _plot(path: str, steps: int, seed: int) -> list[dict[str, Any]]:
    """Step time of ``pile`` against body count for 2-D to 5-D, written as a PNG."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    rows = []
    counts = (50, 100, 300, 1000)
    fig, ax = plt.subplots(figsize=(6, 4), dpi=110)
    for dim in (2, 3, 4, 5):
        ys = []
        for n in counts:
            r = run_scene("pile", dim, n, steps, seed)
            rows.append(r)
            ys.append(r["median_step_ms"])
        ax.plot(counts, ys, marker="o", label=f"{dim}-D")
    ax.axhline(1000 / 60, color="grey", lw=0.8, ls="--", label="60 Hz budget")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("bodies (pile scene)")
    ax.set_ylabel("median step time, ms (one core)")
    ax.set_title("ndrigid step time")
    ax.legend()
    fig.tight_layout()
    os.makedirs(os.path.dirname(path) or ".", exist_ok=True)
    fig.savefig(path)
    return rows


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="ndrigid-bench", description=__doc__.split("\n")[0])
    p.add_argument("scenes", nargs="*", default=[], help=f"scenes to run: {', '.join(SCENES)}")
    p.add_argument("--dim", type=int, default=4)
    p.add_argument("--bodies", type=int, default=300, help="body count (pyramid: base width)")
    p.add_argument("--steps", type=int, default=60)
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--reference", action="store_true", help="run the scalar reference path")
    p.add_argument("--compare", action="store_true", help="run both paths and print the speed ratio")
    p.add_argument("--json", metavar="FILE", help="write one JSON record per run to FILE")
    p.add_argument("--kernels", nargs="+", choices=KERNEL_PATHS, default=["compiled"],
                   help="which paths to time: compiled (numba kernels, the default) and/or numpy")
    p.add_argument("--micro", action="store_true", help="run the kernel micro-benchmarks")
    p.add_argument("--plot", metavar="PNG", help="plot pile step time vs bodies for 2-D..5-D")
    a = p.parse_args(argv)
    if a.dim < 2:
        p.error(f"--dim: expected an integer >= 2, got {a.dim}")
    if a.bodies < 1 or a.steps < 1:
        p.error("--bodies and --steps: expected positive integers")
    rows: list[dict[str, Any]] = []
    for scene in a.scenes:
        if scene not in SCENES:
            p.error(f"scene: expected one of {', '.join(SCENES)}, got {scene!r}")
        if a.compare:
            vec = run_scene(scene, a.dim, a.bodies, a.steps, a.seed, reference=False, kernels="numpy")
            ref = run_scene(scene, a.dim, a.bodies, max(3, a.steps // 10), a.seed, reference=True)
            rows += [vec, ref]
            ratio = ref["median_step_ms"] / vec["median_step_ms"]
            vec["speedup_over_reference"] = ratio
        elif a.reference:
            rows.append(run_scene(scene, a.dim, a.bodies, a.steps, a.seed, reference=True, kernels="numpy"))
        else:
            got = {k: run_scene(scene, a.dim, a.bodies, a.steps, a.seed, kernels=k) for k in a.kernels}
            rows += list(got.values())
            if len(got) == 2:
                got["compiled"]["speedup_over_numpy"] = (got["numpy"]["median_step_ms"]
                                                         / got["compiled"]["median_step_ms"])
    if rows:
        _print_table(rows)
        for r in rows:
            if "speedup_over_reference" in r:
                print(f"{r['scene']} {r['dim']}-D {r['bodies']} bodies: vectorised is "
                      f"{r['speedup_over_reference']:.1f}x faster than the scalar reference path")
            if "speedup_over_numpy" in r:
                print(f"{r['scene']} {r['dim']}-D {r['bodies']} bodies: compiled is "
                      f"{r['speedup_over_numpy']:.1f}x faster than the numpy path")
    if a.micro:
        krows = _kernels()
        for r in krows:
            print(json.dumps(r))
        rows += krows
    if a.plot:
        rows += _plot(a.plot, a.steps, a.seed)
        print(f"wrote {a.plot}")
    if a.json:
        with open(a.json, "w", encoding="utf-8") as fh:
            json.dump(rows, fh, indent=1)
        print(f"wrote {len(rows)} records to {a.json}")
    if not (a.scenes or a.micro or a.plot):
        p.print_help()
    return 0


if __name__ == "__main__":
    sys.exit(main())
