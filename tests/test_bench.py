"""The benchmark command runs every scene and writes valid JSON records (no timing asserted)."""

from __future__ import annotations

import json

import pytest
from ndrigid.bench.__main__ import main
from ndrigid.bench.scenes import SCENES

FIELDS = {"scene", "dim", "bodies", "steps", "median_step_ms", "p90_step_ms", "stage_ms", "contacts",
          "max_depth", "peak_rss_mb"}


@pytest.mark.parametrize("dim", [2, 4], ids=["2d", "4d"])
def test_every_scene_writes_a_record(dim: int, tmp_path, capsys) -> None:  # type: ignore[no-untyped-def]
    out = tmp_path / "bench.json"
    bodies = {"pyramid": 3}
    for scene in SCENES:
        assert main([scene, "--dim", str(dim), "--bodies", str(bodies.get(scene, 12)), "--steps", "2",
                     "--json", str(out)]) == 0
        rec = json.loads(out.read_text())[0]
        assert FIELDS <= rec.keys()
        assert rec["scene"] == scene and rec["dim"] == dim and rec["steps"] == 2
        assert rec["median_step_ms"] > 0 and rec["p90_step_ms"] >= rec["median_step_ms"]
        assert all(v >= 0 for v in rec["stage_ms"].values())
    assert "median ms" in capsys.readouterr().out


def test_compare_runs_both_paths(tmp_path) -> None:  # type: ignore[no-untyped-def]
    out = tmp_path / "cmp.json"
    assert main(["pile", "--dim", "3", "--bodies", "6", "--steps", "3", "--compare", "--json", str(out)]) == 0
    recs = json.loads(out.read_text())
    assert [r["path"] for r in recs] == ["numpy", "reference"]
    assert recs[0]["speedup_over_reference"] > 0
    # the same scene: same bodies on both paths
    assert recs[0]["bodies"] == recs[1]["bodies"]


def test_kernels_option_times_both_paths_in_one_table(tmp_path, capsys) -> None:  # type: ignore[no-untyped-def]
    from ndrigid.core import kernels

    if not kernels.available():
        pytest.skip("numba is not available")
    out = tmp_path / "k.json"
    assert main(["pile", "--dim", "3", "--bodies", "6", "--steps", "3", "--kernels", "numpy", "compiled",
                 "--json", str(out)]) == 0
    recs = json.loads(out.read_text())
    assert [r["path"] for r in recs] == ["numpy", "compiled"]
    assert recs[1]["speedup_over_numpy"] > 0 and recs[0]["bodies"] == recs[1]["bodies"]
    assert "compiled is" in capsys.readouterr().out


def test_bad_arguments_exit_with_a_message(capsys) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(SystemExit):
        main(["nosuchscene"])
    assert "scene" in capsys.readouterr().err
    with pytest.raises(SystemExit):
        main(["pile", "--dim", "1"])


def test_defaults_bench_prints_one_line_per_variant(capsys) -> None:  # type: ignore[no-untyped-def]
    """``python -m ndrigid.bench.defaults``: each group prints its variants; the deep-overlap scene
    gets a box out of the floor with the defaults (the figure the Settings docstring quotes)."""
    from ndrigid.bench.defaults import GROUPS
    from ndrigid.bench.defaults import main as defaults_main

    assert defaults_main(["deep", "spin", "--dims", "2"]) == 0
    lines = [ln for ln in capsys.readouterr().out.splitlines() if "2-D" in ln]
    assert len(lines) == len(GROUPS["deep"][1]) + len(GROUPS["spin"][1])
    assert lines[0].startswith("defaults") and "out of the floor after" in lines[0]


def test_soak_reports_memory_and_a_pile_that_comes_to_rest(tmp_path, capsys) -> None:  # type: ignore[no-untyped-def]
    """``python -m ndrigid.bench.soak`` on a small 4-D pile: one line per interval plus the
    summary; the pile falls asleep within 5 s of simulated time (no kinetic energy left: sleeping
    bodies do not move) and the JSON file holds the lines."""
    import json

    from ndrigid.bench.soak import main

    out = tmp_path / "soak.json"
    assert main(["--bodies", "30", "--steps", "300", "--every", "100", "--json", str(out)]) == 0
    text = capsys.readouterr().out
    assert "MB after the first step" in text and "MB at the end" in text
    rows = json.loads(out.read_text())
    assert [r["step"] for r in rows] == [1, 100, 200, 300]
    assert rows[-1]["awake"] == 0 and rows[-1]["kinetic_energy_j"] == 0.0
    assert all(r["rss_mb"] > 0 for r in rows)


def test_joints_bench_times_both_paths(capsys) -> None:  # type: ignore[no-untyped-def]
    """``python -m ndrigid.bench.joints chain`` and ``ragdolls`` at tiny sizes: one table row per
    path (numpy alone where numba is missing), the ragdoll pile with its ten parts and nine joints
    per figure."""
    from ndrigid.bench.joints import main as joints_main
    from ndrigid.core import kernels

    paths = "both" if kernels.available() else "numpy"
    want = ["numpy", "compiled"] if paths == "both" else ["numpy"]
    assert joints_main(["chain", "--links", "4", "--seconds", "0.05", "--kernels", paths]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].split()[:2] == ["path", "median"]
    assert [ln.split()[0] for ln in lines[1:]] == want
    assert all("4-D chain of 4 released at 90 deg, 6 steps" in ln for ln in lines[1:])
    assert joints_main(["ragdolls", "--dim", "3", "--count", "2", "--steps", "3", "--kernels", paths]) == 0
    rows = [ln for ln in capsys.readouterr().out.splitlines() if "ragdolls" in ln]
    assert [ln.split()[0] for ln in rows] == want
    assert all("(20 bodies, 18 joints)" in ln for ln in rows)
    assert all(float(ln.split()[1]) > 0 for ln in rows)
