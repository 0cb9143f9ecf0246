"""Drawing helpers for pygame: what the player sees of an n-dimensional world, in a few lines.

A :class:`SliceView` cuts a :class:`~ndrigid.core.Simulation` by a flat (``axis_flat`` and friends
from :mod:`ndrigid.core.geometry.slicing`) and paints the result into a pygame ``Surface``:

* a 2-D section (the 2-D world itself, or the slice x_2 = w of a 3-D world) as filled polygons,
  discs with a turning mark and half-space regions clipped to the view;
* a 3-D section (of a 4-D or 5-D world, or a whole 3-D world) as shaded faces with back faces
  removed, in painter's order, through an orbiting camera (perspective or orthographic).

::

    import pygame
    from ndrigid.adapters.loop import FixedStepper
    from ndrigid.adapters.pygame_draw import SliceView
    from ndrigid.core.geometry.slicing import axis_flat

    view = SliceView(sim, axis_flat(4, [0.0]), span=12.0, centre=(0.0, 2.0))
    view.colours[crate] = (186, 132, 78)
    ...
    stepper.advance(frame_seconds)
    view.draw(screen, poses=stepper.interpolated())   # between-step poses: smooth at any frame rate

The view maps slice coordinates to pixels: ``centre`` (slice axes 0 and 1) lands in the middle
of the surface and ``span`` metres fill its width, y up. 3-D sections are seen by a camera turned by
``yaw`` and ``pitch`` (radians) about the point (centre, 0). Nothing here is needed by the core,
which stays free of pygame; the demo draws with this helper.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from ndrigid.core.errors import InputError, InputTypeError, positive_scalar
from ndrigid.core.geometry.slicing import (
    Flat,
    axis_flat,
    face_soup,
    facing_camera,
    halfspace_region,
    make_camera,
    orbit_view,
    paint_order,
    project_points,
    slice_world,
)
from numpy.typing import NDArray

Colour = tuple[int, int, int]
Array = NDArray[np.float64]

#: default colours (r, g, b): bodies without their own colour, static ones, outlines, highlight
BODY_GREY: Colour = (150, 156, 170)
GROUND_GREY: Colour = (70, 78, 92)
GROUND_EDGE: Colour = (110, 120, 138)
INK: Colour = (12, 14, 18)
HIGHLIGHT: Colour = (255, 196, 64)


def shade(colour: Colour, light: float) -> Colour:
    """The colour lit by ``light`` in [0, 1] (ambient 0.35 plus diffuse), clamped to 0..255."""
    f = 0.35 + 0.65 * max(0.0, min(1.0, light))
    return (min(255, int(colour[0] * f)), min(255, int(colour[1] * f)), min(255, int(colour[2] * f)))


def mix(a: Colour, b: Colour, t: float) -> Colour:
    """Linear blend of two colours (t = 0 gives a)."""
    return (int(a[0] + (b[0] - a[0]) * t), int(a[1] + (b[1] - a[1]) * t), int(a[2] + (b[2] - a[2]) * t))


@dataclass
class SliceView:
    """Draws a slice of a simulation into pygame surfaces (see the module notes).

    Args:
        sim: the Simulation to draw.
        flat: the flat to cut by (default: the world itself in 2-D and 3-D, ``x_3 = 0`` in 4-D,
            ``x_3 = x_4 = 0`` in 5-D, via ``axis_flat``); its slice must be 2-D or 3-D.
        span: metres of the slice across the surface's width (> 0).
        centre: slice coordinates (axes 0, 1) at the middle of the surface.
        yaw, pitch: camera turn of 3-D views, radians; ``perspective``: perspective or orthographic.
        colours: body handle -> (r, g, b); others get ``default_colour`` (dynamic and kinematic
            bodies) or ``static_colour``.
        outline: edge colour of polygons and discs (None: no outlines).
        highlight: handles drawn with a ``HIGHLIGHT`` edge (e.g. a picked body).
    """

    sim: Any
    flat: Flat | None = None
    span: float = 12.0
    centre: tuple[float, float] = (0.0, 0.0)
    yaw: float = 0.5
    pitch: float = 0.35
    perspective: bool = True
    colours: dict[int, Colour] = field(default_factory=dict)
    default_colour: Colour = BODY_GREY
    static_colour: Colour = GROUND_GREY
    outline: Colour | None = INK
    highlight: set[int] = field(default_factory=set)
    pygame: Any = None
    _regions: dict[Any, Any] = field(default_factory=dict, repr=False)

    def __post_init__(self) -> None:
        if not hasattr(self.sim, "bodies") or not hasattr(self.sim, "dim"):
            raise InputTypeError(f"sim: expected a Simulation, got {type(self.sim).__name__}")
        if self.flat is None:
            n = self.sim.dim
            self.flat = axis_flat(n, [] if n <= 3 else [0.0] * (n - 3))
        if self.flat.slice_dim not in (2, 3):
            raise InputError("flat: expected a flat whose slice is 2-D or 3-D, got a "
                             f"{self.flat.slice_dim}-D slice")
        self.span = positive_scalar("span", self.span)
        if self.pygame is None:
            import pygame

            self.pygame = pygame

    # -- the screen mapping -----------------------------------------------------------------------

    def scale(self, surface: Any) -> float:
        """Pixels per metre on ``surface``."""
        return surface.get_width() / self.span

    def to_screen(self, surface: Any, xy: Any) -> Array:
        """Pixels (..., 2) of slice points (..., 2) in a 2-D view."""
        xy = np.asarray(xy, dtype=np.float64)
        s = self.scale(surface)
        return np.stack([surface.get_width() / 2 + (xy[..., 0] - self.centre[0]) * s,
                         surface.get_height() / 2 - (xy[..., 1] - self.centre[1]) * s], axis=-1)

    def camera(self) -> Any:
        """The camera of 3-D views: orbiting (centre, 0) at 1.6 spans."""
        target = np.array([self.centre[0], self.centre[1], 0.0])
        return make_camera(orbit_view(self.yaw, self.pitch), target, self.span * 1.6, self.perspective)

    def project(self, surface: Any, points: Any, camera: Any = None) -> tuple[Array, Array]:
        """Pixels (P, 2) and depths (P,) of 3-D slice points (P, 3) in a 3-D view."""
        xy, depth = project_points(points, self.camera() if camera is None else camera)
        s = self.scale(surface)
        return np.stack([surface.get_width() / 2 + xy[:, 0] * s, surface.get_height() / 2 - xy[:, 1] * s],
                        axis=1), depth

    def _colour(self, handle: int) -> Colour:
        c = self.colours.get(handle)
        if c is not None:
            return c
        return self.static_colour if self.sim.kind(handle) == "static" else self.default_colour

    def _region(self, normal: Array, offset: float, lo: Array, hi: Array) -> Any:
        key = (tuple(np.round(normal, 6)), round(offset, 6), tuple(lo), tuple(hi))
        if key not in self._regions:
            if len(self._regions) > 256:
                self._regions.clear()
            self._regions[key] = halfspace_region(normal, offset, lo, hi)
        return self._regions[key]

    # -- drawing ----------------------------------------------------------------------------------

    def draw(self, surface: Any, poses: tuple[Any, Any] | None = None, *, background: Colour | None = None,
             region: tuple[Any, Any] | None = None, camera: Any = None, thin: bool = False) -> int:
        """Paint the slice into ``surface``; returns the number of sections drawn.

        Args:
            poses: (positions (N, n), rotors (N, 2**(n-1))) in row order, e.g.
                ``FixedStepper.interpolated()``; default the bodies' current poses.
            background: fill colour first (default: draw over what is there).
            region: (lo, hi) slice-space box that clips half-spaces (walls, floors); default the
                view's width around ``centre`` (depth +-span/2 in 3-D views).
            camera: a camera for 3-D views instead of :meth:`camera` (e.g. a fixed inset view).
            thin: 3-D views without face outlines (small insets).
        """
        if background is not None:
            surface.fill(background)
        positions, rotors = (None, None) if poses is None else poses
        ws = slice_world(self.sim, self.flat, positions, rotors)
        if self.flat.slice_dim == 2:
            return self._draw_flat(surface, ws, positions, rotors, region)
        return self._draw_solid(surface, ws, region, camera, thin)

    def _box(self, region: Any, dim: int) -> tuple[Array, Array]:
        if region is not None:
            return np.asarray(region[0], dtype=np.float64), np.asarray(region[1], dtype=np.float64)
        h = self.span / 2
        c = np.zeros(dim)
        c[:2] = self.centre
        return c - h, c + h

    def _draw_flat(self, surf: Any, ws: Any, positions: Any, rotors: Any, region: Any) -> int:
        pg, sim = self.pygame, self.sim
        lo, hi = self._box(region, 2)
        drawn = 0
        for rec in ws.records():
            col = self._colour(rec.handle)
            hot = rec.handle in self.highlight
            edge = HIGHLIGHT if hot else self.outline
            width = 2 if hot else 1
            if rec.kind == "halfspace":
                if not np.any(rec.normal):
                    continue
                reg = self._region(rec.normal, rec.offset, lo, hi)
                if reg is not None and reg.outline is not None:
                    ring = self.to_screen(surf, reg.vertices[reg.outline]).tolist()
                    pg.draw.polygon(surf, col, ring)
                    if edge is not None:
                        pg.draw.polygon(surf, GROUND_EDGE if not hot else edge, ring, 1)
                    drawn += 1
            elif rec.kind == "ball":
                c = self.to_screen(surf, rec.centre)
                r = max(1, int(rec.radius * self.scale(surf)))
                pg.draw.circle(surf, col, c.tolist(), r)
                if edge is not None:
                    pg.draw.circle(surf, edge, c.tolist(), r, width)
                # the body's e_0 axis in the slice: shows the ball turning
                row = sim.row(rec.handle)
                M = sim.bodies.rotation[row] if rotors is None else sim.alg.rotor_to_matrix(rotors[row])
                axis = M[:, 0] @ self.flat.frame.T
                tip = c + np.array([axis[0], -axis[1]]) * r
                pg.draw.line(surf, mix(col, INK, 0.5), c.tolist(), tip.tolist(), 2)
                drawn += 1
            elif rec.outline is not None and len(rec.outline) >= 3:
                pts = self.to_screen(surf, rec.vertices[rec.outline]).tolist()
                pg.draw.polygon(surf, col, pts)
                if edge is not None:
                    pg.draw.polygon(surf, edge, pts, width)
                drawn += 1
        return drawn

    def _draw_solid(self, surf: Any, ws: Any, region: Any, camera: Any, thin: bool) -> int:
        cam = self.camera() if camera is None else camera
        lo, hi = self._box(region, 3)
        items = self.solid_items(surf, ws, cam, lambda P: self.project(surf, P, cam), (lo, hi))
        self.paint(surf, items, thin)
        return len(items)

    def solid_items(self, surf: Any, ws: Any, cam: Any, project: Callable[[Array], tuple[Array, Array]],
                    box: tuple[Array, Array]) -> list[tuple[float, str, Any]]:
        """Draw list [(depth, kind, data)] of a 3-D slice: visible faces, balls, half-space regions."""
        soup = face_soup(ws)
        items: list[tuple[float, str, Any]] = []
        light = cam.view[2] * 0.4 + np.array([0.3, 0.8, 0.2])
        light /= np.linalg.norm(light)
        if len(soup.faces):
            vis = np.flatnonzero(facing_camera(soup.normals, soup.centres, cam))
            px, _ = project(soup.points)
            _, fdepth = project(soup.centres[vis])
            lit = soup.normals[vis] @ light
            for g, d, lv in zip(vis.tolist(), fdepth.tolist(), lit.tolist(), strict=True):  # per face
                f = soup.faces[g]
                h = int(soup.handles[g])
                col = shade(self._colour(h), lv)
                items.append((d, "poly", (px[f[f >= 0]].tolist(), col, h in self.highlight)))
        if len(soup.balls_radius):
            bp, bd = project(soup.balls_centre)
            s = self.scale(surf)
            balls = zip(bp.tolist(), bd.tolist(), soup.balls_radius.tolist(), soup.balls_handle.tolist(),
                        strict=True)
            for c, d, r, h in balls:
                rp = r * s * (cam.distance / max(d, 1e-6) if cam.perspective else 1.0)
                items.append((d, "ball", (c, rp, self._colour(int(h)), int(h) in self.highlight)))
        for bt in ws.batches:
            if bt.kind != "halfspace":
                continue
            for nrm, off, h in zip(bt.normals[bt.hit], bt.offsets[bt.hit], bt.handles[bt.hit], strict=True):
                if not np.any(nrm):
                    continue
                reg = self._region(nrm, float(off), *box)
                if reg is None:
                    continue
                cen = np.stack([reg.vertices[f].mean(axis=0) for f in reg.faces])
                keep = facing_camera(reg.face_normals, cen, cam)
                px, _ = project(reg.vertices)
                _, dep = project(cen)
                col = self._colour(int(h))
                for f, ok, d, nr in zip(reg.faces, keep, dep, reg.face_normals, strict=True):
                    if ok:
                        lit = shade(col, float(nr @ light))
                        items.append((float(d), "poly", (px[f].tolist(), lit, False)))
        return items

    def paint(self, surf: Any, items: list[tuple[float, str, Any]], thin: bool = False) -> None:
        """Paint a draw list from :meth:`solid_items` far to near (painter's order)."""
        pg = self.pygame
        for i in paint_order([it[0] for it in items]).tolist():
            _, kind, data = items[i]
            if kind == "poly":
                pts, col, hot = data
                if len(pts) >= 3:
                    pg.draw.polygon(surf, col, pts)
                    if not thin and (self.outline is not None or hot):
                        edge = HIGHLIGHT if hot else mix(col, self.outline or INK, 0.6)
                        pg.draw.polygon(surf, edge, pts, 2 if hot else 1)
            else:
                c, rp, col, hot = data
                r = max(1, int(rp))
                pg.draw.circle(surf, shade(col, 0.55), c, r)
                glint = (c[0] - r * 0.3, c[1] - r * 0.3)
                pg.draw.circle(surf, shade(col, 1.0), glint, max(1, int(r * 0.45)))
                if self.outline is not None or hot:
                    pg.draw.circle(surf, HIGHLIGHT if hot else self.outline, c, r, 2 if hot else 1)


__all__ = ["BODY_GREY", "GROUND_EDGE", "GROUND_GREY", "HIGHLIGHT", "INK", "SliceView", "mix", "shade"]
