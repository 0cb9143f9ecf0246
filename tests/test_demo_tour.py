"""The tour (ndrigid.demo.tour): every scene in every dimension on one contact sheet PNG, and the
README's picture made with it.

The layout is stated in the tour's module notes (tiles of w x h, GAP pixels between them and
around the sheet, a teaching row 2 h + GAP tall); the checks recompute the sheet size from that
statement, and look in every tile, below its name chip, for pixels that are not the scenes'
background.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

import numpy as np
import pytest

os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
pygame = pytest.importorskip("pygame")

from ndrigid.core import InputError  # noqa: E402
from ndrigid.demo import palette as P  # noqa: E402
from ndrigid.demo.scenes import scene_names  # noqa: E402
from ndrigid.demo.tour import GAP, run_tour, tiles  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]


def _expected_size(tile: tuple[int, int]) -> tuple[int, int]:
    w, h = tile
    rows = len(scene_names())
    return 4 * w + 5 * GAP, rows * h + (2 * h + GAP) + (rows + 2) * GAP


def _load(path: Path) -> np.ndarray:
    pygame.init()
    try:
        return pygame.surfarray.array3d(pygame.image.load(str(path))).transpose(1, 0, 2).astype(int)
    finally:
        pygame.quit()


def test_tour_writes_a_sheet_of_the_stated_size_with_something_in_every_tile(tmp_path) -> None:  # type: ignore[no-untyped-def]
    tile = (160, 100)
    res = run_tour(tmp_path / "sheet.png", frames=3, tile=tile, render=1, teach_frames=30)
    img = _load(res["path"])
    assert res["size"] == _expected_size(tile)
    assert img.shape[:2] == (res["size"][1], res["size"][0])
    keys = set(res["tiles"])
    assert keys == {(s, d) for s in scene_names() for d in (2, 3, 4, 5)} | {("teach",)}
    rects = list(res["tiles"].values())
    for a in rects:  # tiles do not overlap and lie on the sheet
        x, y, w, h = a
        assert x >= GAP and y >= GAP and x + w <= img.shape[1] - GAP and y + h <= img.shape[0] - GAP
        for b in rects:
            if a is not b:
                assert x + w <= b[0] or b[0] + b[2] <= x or y + h <= b[1] or b[1] + b[3] <= y
    background = np.array(P.NIGHT_SLATE)
    for key, (x, y, w, h) in res["tiles"].items():
        below_chip = img[y + h // 4:y + h, x:x + w]  # the name chip sits in the top-left corner
        lit = np.abs(below_chip - background).sum(axis=-1) > 30
        assert lit.mean() > 0.02, f"tile {key} is (almost) empty: {lit.mean():.3f} of it drawn"
    # the teaching tile shows the box (warm ochre pixels) and the amber spin-plane lines
    x, y, w, h = res["tiles"][("teach",)]
    t = img[y:y + h, x:x + w]
    assert np.sum((t[..., 0] > t[..., 2] + 40) & (t[..., 0] > 90) & (t[..., 1] < 200)) > 50
    assert np.sum(np.abs(t - np.array(P.SIGNAL_AMBER)).sum(axis=-1) < 40) > 20
    # the gaps between tiles are the sheet's colour, so the tiles read as a grid
    assert tuple(img[0, 0]) == tuple(img[GAP // 2, img.shape[1] // 2]) == tuple(np.array(P.OUTLINE_INK))


def test_tour_refuses_bad_arguments_by_name(tmp_path) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(InputError, match="frames: expected a whole number >= 1, got 0"):
        run_tour(tmp_path / "a.png", frames=0)
    with pytest.raises(InputError, match="tile: expected"):
        run_tour(tmp_path / "a.png", tile=(10, 10))
    with pytest.raises(InputError, match="out: expected a file name ending in .png"):
        run_tour(tmp_path / "a.jpg", frames=1)
    with pytest.raises(InputError, match="dims: expected a dimension from 3 to 6"):
        run_tour(tmp_path / "a.png", frames=1, teach_dims=(2, 3))


def test_readme_picture_is_the_contact_sheet() -> None:
    """The demo section shows docs/demo.png; that file is a tour sheet of the default tiles
    (320 x 200) and stays under 1 MB."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## The demo"):text.index("## What the engine does")]
    pictures = re.findall(r"!\[[^\]]*\]\(([^)]+)\)", section)
    assert pictures == ["docs/demo.png"]
    assert "--tour" in section
    path = ROOT / "docs" / "demo.png"
    assert path.stat().st_size < 1_000_000
    img = _load(path)
    size, rects = tiles(scene_names(), (320, 200))
    assert (img.shape[1], img.shape[0]) == size == _expected_size((320, 200))
    x, y, w, h = rects[("teach",)]
    assert np.abs(img[y + h // 4:y + h, x:x + w] - np.array(P.NIGHT_SLATE)).sum(axis=-1).max() > 30


BAD_OPTIONS = [(["--tour", "--frames", "0"], "--frames: expected a number above 0"),
               (["--tour", "--tile", "40x30"], "--tile: expected WxH"),
               (["--teach", "--headless", "--seconds", "-1"], "--seconds: expected"),
               (["--measure", "0"], "--measure: expected a number above 0")]


@pytest.mark.parametrize(("argv", "said"), BAD_OPTIONS)
def test_command_line_refuses_bad_values_by_option(argv, said, capsys) -> None:  # type: ignore[no-untyped-def]
    from ndrigid.demo.app import main

    assert main(argv) == 2
    assert said in capsys.readouterr().err
