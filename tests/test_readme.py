"""The README's code examples run as written (common practice: documentation that executes)."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

README = Path(__file__).resolve().parents[1] / "README.md"


def _python_blocks() -> list[str]:
    return re.findall(r"```python\n(.*?)```", README.read_text(encoding="utf-8"), flags=re.S)


def test_readme_4d_example_runs_and_the_crate_lands() -> None:
    """The 4-D quick start: the crate falls onto the ground and rests on it (half-size 0.5, so its
    centre ends about 0.5 above y = 0; a body cannot pass through the static ground)."""
    block = next(b for b in _python_blocks() if "Simulation(4)" in b)
    ns: dict[str, object] = {}
    exec(compile(block.replace("print(", "(lambda *a: None)("), "README", "exec"), ns)  # noqa: S102
    sim = ns["sim"]
    crate = ns["crate"]
    y = sim.position(crate)[1]  # type: ignore[attr-defined]
    assert np.isfinite(y)
    assert 0.3 < y < 3.0


def test_readme_room_example_runs() -> None:
    """The walls block: add_room returns one handle per face (a floor and two walls per other axis)."""
    block = next(b for b in _python_blocks() if "add_room" in b)
    ns: dict[str, object] = {}
    exec(block, ns)  # noqa: S102 - the README's own example
    assert len(ns["faces"]) == 7  # type: ignore[arg-type]


def test_readme_names_the_two_setup_commands() -> None:
    text = README.read_text(encoding="utf-8")
    assert 'python3 -m pip install -e ".[test]" && python3 -m pytest -q' in text
    assert "python3 -m ndrigid.demo" in text
    ci = (README.parent / ".ci" / "run").read_text(encoding="utf-8")
    assert 'python3 -m pip install -e ".[test]" && python3 -m pytest -q' in ci


def test_readme_mesh_example_runs(tmp_path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    """The user-mesh example: a closed 4-D boundary (the 24-cell's, written as nOFF) gives the
    mass the hull would have (same solid; scipy ConvexHull volume as the outside reference)."""
    from ndrigid.core import Simulation, cell_24, write_noff
    from scipy.spatial import ConvexHull

    poly = cell_24(edge=0.3)
    write_noff(tmp_path / "rock.noff", poly.boundary_mesh())
    monkeypatch.chdir(tmp_path)
    block = next(b for b in _python_blocks() if "read_noff" in b)
    ns: dict[str, object] = {"sim": Simulation(4)}
    exec(compile(block, "README", "exec"), ns)  # noqa: S102
    props = ns["props"]
    vol = ConvexHull(np.asarray(poly.vertices)).volume
    assert abs(props.volume - vol) < 1e-12 * max(1.0, vol)  # type: ignore[attr-defined]
    assert abs(props.mass - 2600.0 * vol) < 1e-9  # type: ignore[attr-defined]
    sim = ns["sim"]
    assert sim.count == 1  # type: ignore[attr-defined]


def _settings_table() -> list[tuple[list[str], list[str]]]:
    text = README.read_text(encoding="utf-8")
    section = text[text.index("| setting (`Settings`)"):]
    rows = []
    for line in section.splitlines()[2:]:
        if not line.startswith("|"):
            break
        cells = [c.strip() for c in line.strip("|").split("|")]
        names = re.findall(r"`([a-z_]+)`", cells[0])
        values = [v.strip() for v in cells[1].split(",")]
        rows.append((names, values))
    return rows


def test_readme_settings_table_matches_the_defaults() -> None:
    """Every setting the README documents exists, with the default it states (docs kept true)."""
    from ndrigid.core import Settings

    s = Settings()
    rows = _settings_table()
    assert len(rows) >= 8
    for names, values in rows:
        assert len(names) == len(values), (names, values)
        for name, value in zip(names, values, strict=True):
            actual = getattr(s, name)
            token = value.split()[0].strip('"')
            if isinstance(actual, bool):
                assert token == str(actual), (name, value, actual)
            elif isinstance(actual, (int, float)):
                assert float(token) == actual, (name, value, actual)
            else:
                assert token == actual, (name, value, actual)


def test_readme_esper_example_runs_and_the_plum_lands_in_the_basket() -> None:
    """The esper section: the plum (radius 0.12) falls onto the basket box (top at y = 0.8) and
    rests there, and the touch reaches game code as a CONTACT_BEGIN event (common practice:
    a resting ball sits one radius above its support)."""
    import esper

    block = next(b for b in _python_blocks() if "PhysicsProcessor" in b)
    previous = esper.current_world
    esper.switch_world("readme-esper-example")
    try:
        ns: dict[str, object] = {}
        exec(compile(block.replace("print(", "(lambda *a: None)("), "README", "exec"), ns)  # noqa: S102
        t = ns["t"]
        assert abs(t.position[1] - 0.92) < 0.02  # type: ignore[attr-defined]
        assert ns["touches"]
    finally:
        esper.switch_world(previous)
        esper.delete_world("readme-esper-example")
