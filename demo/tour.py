"""The tour: every scene in every dimension, rendered headless onto one contact sheet PNG.

``python -m ndrigid.demo --tour --frames 150 --out docs/demo.png`` runs each scene of the registry
(rows) in 2-D, 3-D, 4-D and 5-D (columns) for ``frames`` fixed steps, draws its last frame without
the title and status bars into a tile, names it in the tile's corner, and adds the teaching scene
(the tumbling box in 3-D and 5-D with its plots, run for ``teach_frames`` steps, 12 s by
default) as one wide tile across the bottom. The README's picture is made this way.

Layout (pixels; ``tile`` = (w, h), ``GAP`` between tiles and around the sheet): the sheet is
``4 w + 5 GAP`` wide; the scene rows are ``h`` tall and the teaching row ``2 h + GAP``, so the
sheet is ``3 h + (2 h + GAP) + 5 GAP`` tall with the three scenes. Tiles are drawn at
``render`` times their size and scaled down smoothly (text and edges stay clean).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from ndrigid.core import InputError, InputTypeError

from . import palette as P

DIMS = (2, 3, 4, 5)
#: pixels between tiles and around the sheet
GAP = 6
#: steps of the teaching tile: 12 s, in which the 3-D box flips twice (at 3.1 and 9.1 s, see
#: ndrigid.demo.teach.SPIN)
TEACH_FRAMES = 720
#: the sheet's colour between tiles (tiles themselves have the scenes' background)
SHEET: P.Colour = P.OUTLINE_INK


def _whole(name: str, value: Any, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise InputTypeError(f"{name}: expected a whole number >= {minimum}, got {value!r}")
    if value < minimum:
        raise InputError(f"{name}: expected a whole number >= {minimum}, got {value}")
    return value


Rect = tuple[int, int, int, int]


def tiles(scenes: list[str], tile: tuple[int, int]) -> tuple[tuple[int, int], dict[Any, Rect]]:
    """The sheet's size and each tile's rectangle (x, y, w, h): keys (scene, dim) and ("teach",)."""
    w, h = tile
    rects: dict[Any, Rect] = {}
    for r, name in enumerate(scenes):
        for c, dim in enumerate(DIMS):
            rects[(name, dim)] = (GAP + c * (w + GAP), GAP + r * (h + GAP), w, h)
    y = GAP + len(scenes) * (h + GAP)
    width = len(DIMS) * w + (len(DIMS) + 1) * GAP
    rects[("teach",)] = (GAP, y, width - 2 * GAP, 2 * h + GAP)
    return (width, y + 2 * h + 2 * GAP), rects


def _label(pg: Any, font: Any, surf: Any, text: str) -> None:
    img = font.render(text, True, P.CHALK)
    chip = pg.Surface((img.get_width() + 10, img.get_height() + 4))
    chip.fill(P.DEEP_SLATE)
    chip.blit(img, (5, 2))
    surf.blit(chip, (4, 4))


def run_tour(out: str | Path, frames: int = 150, tile: tuple[int, int] = (320, 200), bodies: int = 18,
             render: int = 2, teach_dims: tuple[int, int] = (3, 5),
             teach_frames: int = TEACH_FRAMES) -> dict[str, Any]:
    """Render the contact sheet to the PNG ``out``: each scene after ``frames`` steps, the teaching
    scene after ``teach_frames``. Returns ``path``, ``size`` and ``tiles`` (see :func:`tiles`)."""
    from . import scenes as S
    from .app import STEP, App
    from .teach import TeachApp, check_dims

    frames = _whole("frames", frames, 1)
    teach_frames = _whole("teach_frames", teach_frames, 1)
    render = _whole("render", render, 1)
    bodies = _whole("bodies", bodies, 1)
    if (not isinstance(tile, (tuple, list)) or len(tile) != 2
            or not all(isinstance(v, int) and not isinstance(v, bool) and v >= 80 for v in tile)):
        raise InputError(f"tile: expected (width, height) in whole pixels, each at least 80, got {tile!r}")
    teach_dims = check_dims(teach_dims)
    path = Path(out)
    if path.suffix.lower() != ".png":
        raise InputError(f"out: expected a file name ending in .png, got {str(out)!r}")
    os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
    os.environ.setdefault("PYGAME_HIDE_SUPPORT_PROMPT", "1")
    import pygame

    names = S.scene_names()
    size, rects = tiles(names, (int(tile[0]), int(tile[1])))
    pygame.init()
    try:
        sheet = pygame.Surface(size)
        sheet.fill(SHEET)
        font = pygame.font.Font(None, max(14, tile[1] // 11))
        for (key, rect) in rects.items():
            big = (rect[2] * render, rect[3] * render)
            if key == ("teach",):
                app: Any = TeachApp(pygame, teach_dims, big, headless=True, text=13 * render)
                for _ in range(teach_frames):
                    app.advance(STEP)
                surf = pygame.Surface(big)
                surf.fill(P.NIGHT_SLATE)
                app.view.draw(surf, top=(font.get_height() + 12) * render)
                text = (f"teaching: the same box tumbling in {teach_dims[0]}-D and {teach_dims[1]}-D, "
                        f"energy, |L| and momentum shares (gyroscopic 'split'), t = {app.tumbles[0].t:.1f} s")
            else:
                name, dim = key
                app = App(pygame, dim, name, big, bodies, headless=True)
                for _ in range(frames):
                    app.advance(STEP)
                surf = pygame.Surface(big)
                app.draw_scene(surf)
                app.world.close()
                text = f"{name}  {dim}-D"
            small = pygame.transform.smoothscale(surf, rect[2:]) if render > 1 else surf
            _label(pygame, font, small, text)
            sheet.blit(small, rect[:2])
        path.parent.mkdir(parents=True, exist_ok=True)
        pygame.image.save(sheet, str(path))
    finally:
        pygame.quit()
    return {"path": path, "size": size, "tiles": rects}


__all__ = ["DIMS", "GAP", "TEACH_FRAMES", "run_tour", "tiles"]
