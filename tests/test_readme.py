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


def test_readme_names_the_two_setup_commands() -> None:
    text = README.read_text(encoding="utf-8")
    assert 'python3 -m pip install -e ".[test]" && python3 -m pytest -q' in text
    assert "python3 -m ndrigid.demo" in text
    ci = (README.parent / ".ci" / "run").read_text(encoding="utf-8")
    assert 'python3 -m pip install -e ".[test]" && python3 -m pytest -q' in ci
