"""Headless demo: every scene runs in 2-D to 5-D and its frames show the bodies.

Each scene runs 120 frames with 3 dynamic bodies in a 320x240 surface and saves only its last
frame. The check is brute force from the public API: the section of every dynamic body that the
slice cuts is computed with ``slice_world``, its centre is mapped to a pixel with the app's own
view mapping, and that pixel must differ from the background colour (the centre of a convex
section projects inside the section's drawn silhouette).
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from conftest import dims

os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
pygame = pytest.importorskip("pygame")

from ndrigid.core import DYNAMIC  # noqa: E402
from ndrigid.core.geometry.slicing import slice_world  # noqa: E402
from ndrigid.demo import palette  # noqa: E402
from ndrigid.demo.app import run_headless  # noqa: E402
from ndrigid.demo.scenes import scene_names  # noqa: E402

SIZE = (320, 240)


def _body_pixels(app) -> list[tuple[int, tuple[int, int]]]:
    """(handle, pixel) of the section centre of every dynamic body the slice cuts, inside the view."""
    sim, flat = app.sim, app.flat()
    ws = slice_world(sim, flat)
    out = []
    bar = app.font.get_height() + 8
    for bt in ws.batches:
        if bt.kind == "halfspace" or bt.centres is None:
            continue
        rows = np.flatnonzero(bt.hit)
        if flat.slice_dim == 2:
            px = app.to_screen(bt.centres[rows])
        else:
            px, depth = app.project3(bt.centres[rows], app.camera())
            rows, px = rows[depth > 0], px[depth > 0]
        for r, p in zip(rows.tolist(), px.tolist(), strict=True):
            h = int(bt.handles[r])
            if sim.bodies.kind[sim.row(h)] != DYNAMIC:
                continue
            x, y = int(round(p[0])), int(round(p[1]))
            in_inset = app.dim == 3 and x >= SIZE[0] - SIZE[0] // 3 - 10 and y <= SIZE[1] // 3 + 10
            if 2 <= x < SIZE[0] - 2 and 20 <= y < SIZE[1] - bar - 2 and not in_inset:
                out.append((h, (x, y)))
    return out


@dims()
@pytest.mark.parametrize("scene", scene_names())
def test_headless_scene_runs_and_shows_bodies(dim: int, scene: str, tmp_path) -> None:
    res = run_headless(dim, scene, frames=120, out=tmp_path, size=SIZE, bodies=3, every=0)
    assert res["frames"] == 120
    assert res["last"].exists()
    app = res["app"]
    assert np.all(np.isfinite(app.sim.positions))
    pygame.init()
    try:
        img = pygame.image.load(str(res["last"]))
        seen = _body_pixels(app)
        if dim == 2:
            assert seen, "a 2-D view shows the whole world, so every body in view is drawn"
        for h, (x, y) in seen:
            assert tuple(img.get_at((x, y)))[:3] != palette.NIGHT_SLATE, f"body {h} not drawn at {(x, y)}"
        # the frame is not blank: a good share of pixels are not background
        arr = pygame.surfarray.array3d(img).reshape(-1, 3)
        assert np.mean(np.any(arr != np.array(palette.NIGHT_SLATE), axis=1)) > 0.1
    finally:
        pygame.quit()


def test_precompile_splash_shows_progress_and_compiles_cold_families(monkeypatch: pytest.MonkeyPatch) -> None:
    """With a cold cache the window compiles every family of the dimension on a worker thread and
    draws a progress screen meanwhile; with a warm one it returns at once (nothing compiled)."""
    import threading

    from ndrigid.core import kernels
    from ndrigid.demo.app import precompile_with_splash

    if not kernels.available():
        pytest.skip("numba is not available")
    calls: list[tuple[list[int], list[str]]] = []
    release = threading.Event()

    def fake_precompile(dims, families, progress):  # type: ignore[no-untyped-def]
        release.wait(2.0)  # long enough for the splash to draw a frame
        calls.append((list(dims), list(families)))
        for i, f in enumerate(families):
            progress(f, dims[0], i + 1, len(families))
        return {}

    pygame.init()
    try:
        screen = pygame.display.set_mode((320, 240))
        monkeypatch.setattr(kernels, "is_warm", lambda family, n: False)
        monkeypatch.setattr(kernels, "precompile", fake_precompile)
        threading.Timer(0.3, release.set).start()
        assert precompile_with_splash(pygame, screen, 4)
        assert calls == [([4], list(kernels.all_families()))]
        lit = pygame.surfarray.array3d(screen).reshape(-1, 3)
        assert (lit.max(axis=1) > 100).any()  # the progress text was drawn
        calls.clear()
        monkeypatch.setattr(kernels, "is_warm", lambda family, n: True)
        assert precompile_with_splash(pygame, screen, 4)
        assert calls == []
    finally:
        pygame.quit()
