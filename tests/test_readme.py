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


def test_readme_mesh_example_runs() -> None:
    """The mesh example, on the shipped sample: the closed 4-D boundary of a convex rock encloses
    the volume of its vertices' convex hull (scipy ConvexHull as the outside reference), and the
    body added from the mesh takes the mesh's exact mass and inertia."""
    from ndrigid.core import SAMPLE_MESH, read_noff
    from scipy.spatial import ConvexHull

    block = next(b for b in _python_blocks() if "read_noff" in b)
    ns: dict[str, object] = {}
    exec(compile(block.replace("print(", "(lambda *a: None)("), "README", "exec"), ns)  # noqa: S102
    props = ns["props"]
    vol = ConvexHull(np.asarray(read_noff(SAMPLE_MESH, kind="mesh").vertices)).volume
    assert abs(props.volume - vol) < 1e-12 * max(1.0, vol)  # type: ignore[attr-defined]
    assert abs(props.mass - 2600.0 * vol) < 1e-9  # type: ignore[attr-defined]
    sim, rock = ns["sim"], ns["rock"]
    assert sim.count == 1  # type: ignore[attr-defined]
    assert abs(sim.mass(rock) - props.mass) < 1e-9  # type: ignore[attr-defined]
    np.testing.assert_allclose(sim.inertia(rock, "body"), props.inertia, rtol=1e-12,  # type: ignore[attr-defined]
                               atol=1e-15)


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
    rests there, and the touch reaches game code as a begin event in ``physics.contacts``, with its
    approach speed (common practice: a resting ball sits one radius above its support)."""
    import esper

    block = next(b for b in _python_blocks() if "PhysicsProcessor" in b)
    previous = esper.current_world
    esper.switch_world("readme-esper-example")
    try:
        ns: dict[str, object] = {}
        exec(compile(block.replace("print(", "(lambda *a: None)("), "README", "exec"), ns)  # noqa: S102
        t = ns["t"]
        assert abs(t.position[1] - 0.92) < 0.02  # type: ignore[attr-defined]
        touches = ns["touches"]
        assert touches and touches[0][2] > 5.0  # type: ignore[index]  # dropped 2.6 m: ~7 m/s
    finally:
        esper.switch_world(previous)
        esper.delete_world("readme-esper-example")


def test_readme_esper_joint_example_drives_the_gate_to_its_upper_limit() -> None:
    """The joint component block: the motor (2 rad/s, at most 400 N m) beats the gate's weight
    torque, at most m g d = 20 kg * 9.81 m/s^2 * 0.5 m = 98 N m (a 1 x 2 x 0.1 x 0.1 m box at the
    default 1000 kg/m^3, centre 0.5 m from the hinge: statics, any mechanics text), so it turns
    the gate up until the hinge's upper limit holds it at 1.4 rad; the angle read back through the
    component stays within 5 mrad of the limit."""
    import esper

    block = next(b for b in _python_blocks() if "Joint(" in b)
    previous = esper.current_world
    esper.switch_world("readme-joint-example")
    try:
        ns: dict[str, object] = {}
        exec(compile(block.replace("print(", "(lambda *a: None)("), "README", "exec"), ns)  # noqa: S102
        joint = esper.component_for_entity(ns["gate"], ns["Joint"])  # type: ignore[arg-type]
        assert joint.state == "live"
        assert abs(joint.angle - 1.4) < 5e-3
    finally:
        esper.switch_world(previous)
        esper.delete_world("readme-joint-example")


def test_readme_contact_example_runs_and_the_marble_bounces_louder_first() -> None:
    """The contacts section: a marble dropped from 1.9 m with restitution 0.4 hits at
    sqrt(2 g h) = 6.1 m/s (free fall, any mechanics text), so the first volume is full and each
    later bounce is quieter (approach speeds fall by e per bounce, Newton's law of restitution);
    at rest the floor's impulse per step carries its weight m g dt (Newton's first law)."""
    block = next(b for b in _python_blocks() if "volumes" in b)
    ns: dict[str, object] = {}
    exec(compile(block.replace("print(", "(lambda *a: None)("), "README", "exec"), ns)  # noqa: S102
    volumes = ns["volumes"]
    assert isinstance(volumes, list) and len(volumes) >= 3
    assert volumes[0] == 1.0 and volumes[1] < volumes[0] and volumes[2] < volumes[1]
    sim, marble = ns["sim"], ns["marble"]
    m = sim.mass(marble)  # type: ignore[attr-defined]
    assert ns["resting"].other.tolist() == [ns["floor"]]  # type: ignore[attr-defined]
    up = ns["sim"].impulse_between(ns["floor"], marble)  # type: ignore[attr-defined]
    assert abs(up[1] - m * 9.81 / 60) < 0.01 * m * 9.81 / 60


def test_readme_esper_example_prints_no_weakmethod_message_at_exit(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """Run as a script, the esper section exits cleanly: no "Exception ignored" from esper's weak
    handler references at interpreter exit."""
    import subprocess
    import sys

    block = next(b for b in _python_blocks() if "PhysicsProcessor" in b)
    script = tmp_path / "esper_example.py"
    script.write_text(block, encoding="utf-8")
    done = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=300,
                          check=False)
    assert done.returncode == 0, done.stderr
    assert "Exception ignored" not in done.stderr
    assert "WeakMethod" not in done.stderr


def test_every_python_block_in_the_readme_runs() -> None:
    """Each ```python block runs as written, in a fresh namespace (and, for esper, a fresh world),
    so a block added later is covered too; the blocks' own results are checked above."""
    import esper

    blocks = _python_blocks()
    assert len(blocks) >= 5
    for i, block in enumerate(blocks):
        previous = esper.current_world
        world = f"readme-block-{i}"
        esper.switch_world(world)
        try:
            exec(compile(block.replace("print(", "(lambda *a: None)("), f"README block {i}", "exec"), {})  # noqa: S102
        finally:
            esper.switch_world(previous)
            esper.delete_world(world)


def test_readme_collision_example_agrees_with_itself_and_the_geometry() -> None:
    """The standalone collision block: the gap is positive with closest points that far apart; the
    overlapping pair reports positive depths; the ray enters the turned crate where its own
    slab test says (Kay and Kajiya 1986: the largest entering distance over the box's slabs)."""
    block = next(b for b in _python_blocks() if "contact_manifold" in b)
    ns: dict[str, object] = {}
    exec(compile(block.replace("print(", "(lambda *a: None)("), "README", "exec"), ns)  # noqa: S102
    gap, hits, points, ray = ns["gap"], ns["hits"], ns["points"], ns["ray"]
    assert gap.distance > 0.0  # type: ignore[attr-defined]
    assert abs(np.linalg.norm(gap.point_b - gap.point_a) - gap.distance) < 1e-9  # type: ignore[attr-defined]
    assert hits is True and np.all(points.depth > 0.0)  # type: ignore[attr-defined]
    crate = ns["crate"]
    R = ns["turn"]
    from ndrigid.core import Algebra

    M = Algebra(4).rotor_to_matrix(R)
    o, d = M.T @ np.array([-5.0, 0, 0, 0]), M.T @ np.eye(4)[0]
    h = np.asarray(crate.half_extents)  # type: ignore[attr-defined]
    with np.errstate(divide="ignore"):
        t_enter = np.max(np.minimum((-h - o) / d, (h - o) / d))
    assert abs(ray.distance - t_enter) < 1e-9  # type: ignore[attr-defined]


def test_readme_drawing_example_paints_the_crate() -> None:
    """The drawing block runs headless and paints the slice: the floor and the shaded crate (its
    warm brown, r > g > b, in some light) cover part of the screen."""
    import pygame

    block = next(b for b in _python_blocks() if "SliceView" in b)
    ns: dict[str, object] = {}
    exec(compile(block.replace("pygame.quit()", ""), "README", "exec"), ns)  # noqa: S102
    px = pygame.surfarray.array3d(pygame.display.get_surface()).reshape(-1, 3).astype(int)
    painted = np.any(px != np.array((22, 26, 34)), axis=1)
    warm = (px[:, 0] > px[:, 1] + 20) & (px[:, 1] > px[:, 2] + 20)
    assert painted.sum() > 0.1 * len(px) and warm.sum() > 500
    pygame.quit()
