"""The API reference builds with the README's command (pdoc, the ``docs`` extra) and covers the core,
the adapters and the contact and collision entry points game code reaches for."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

README = Path(__file__).resolve().parents[1] / "README.md"


def test_api_reference_builds_from_the_readme_command(tmp_path: Path) -> None:
    line = next(ln for ln in README.read_text(encoding="utf-8").splitlines() if "-m pdoc" in ln)
    cmd = re.search(r"python3 -m pdoc (.*) -o build/api", line)
    assert cmd, line
    args = cmd.group(1).split()
    out = tmp_path / "api"
    done = subprocess.run([sys.executable, "-m", "pdoc", *args, "-o", str(out)], capture_output=True,
                          text=True, timeout=300, check=False)
    assert done.returncode == 0, done.stderr
    core = (out / "ndrigid" / "core.html").read_text(encoding="utf-8")
    adapters = (out / "ndrigid" / "adapters.html").read_text(encoding="utf-8")
    for name in ("Simulation", "contact_manifold", "distance", "raycast_shape", "SAMPLE_MESH"):
        assert name in core, name
    stages = out / "ndrigid" / "core" / "world" / "stages.html"
    assert "approach_speed" in stages.read_text(encoding="utf-8")
    assert (out / "ndrigid" / "adapters" / "esper.html").exists()
    assert "PhysicsProcessor" in (out / "ndrigid" / "adapters" / "esper.html").read_text(encoding="utf-8")
    del adapters
