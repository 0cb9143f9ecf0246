"""The pygame front end: views of a world in 2-D to 5-D, picking and dragging, overlays, headless frames.

Views by dimension (slices from :mod:`ndrigid.core.geometry.slicing`):

* 2-D: the world itself (its c = 0 "section"), drawn flat.
* 3-D: the 2-D slice x_2 = w (keys Q/E move w) fills the window; an inset shows the whole 3-D world
  projected by a fixed camera, with the slice plane marked.
* 4-D, 5-D: the 3-D slice x_3 = w (and x_4 = v in 5-D, keys Z/C) drawn as a shaded projection with
  back-face removal and painter's order; the right mouse button (or arrow keys) turns the camera.

Picking: in flat views the body under the mouse is the one containing the slice point
(``queries.bodies_containing_point``); in 3-D views a ray from the eye through the pixel, lying in
the slice, is cast with ``queries.raycast``. A picked body hangs from a damped spring (a force at
the grabbed point, ``Simulation.apply_force``) and keeps its velocity when let go, so it can be
thrown.

Everything drawn comes from the public API: the esper adapter (through :mod:`.world`), the
Simulation's arrays and the slicing/query functions. Set ``SDL_VIDEODRIVER=dummy`` before pygame is
imported to render without a display (``--headless`` does it).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

#: the help overlay: (keys, what they do), drawn in two aligned columns
HELP = [
    ("mouse left", "pick a body, drag it on a spring, release to throw"),
    ("mouse right", "turn the 3-D view (arrow keys too)"),
    ("Q / E", "move the slice along the last hidden axis"),
    ("Z / C", "move the slice along the other hidden axis (5-D)"),
    ("space", "pause / resume"),
    (".", "single step while paused"),
    ("R", "reset the scene"),
    ("tab / 1-4", "switch scenes (the slice and camera recentre)"),
    ("B", "drawbridge scene: raise / lower the deck now"),
    ("P", "perspective / orthographic"),
    ("H", "this help"),
    ("esc", "quit"),
]
HELP_LINES = [f"{k:<12}{v}" for k, v in HELP]

#: physics step, seconds, and the most steps one drawn frame takes (beyond that the world runs
#: in slow motion rather than making every frame slower still)
STEP = 1.0 / 60.0
MAX_STEPS_PER_FRAME = 2
#: weight of the newest sample in the exponential moving averages of the status line. Measured
#: on rockfall 4-D (600 steps, the Simulation's step time): the shown value changes by 0.04 ms
#: a frame (median; p95 0.20 ms) against 0.29 ms (p95 1.74 ms) unsmoothed, and follows a lasting
#: change to 90 % in 22 frames (0.05: 0.025 ms but 45 frames; 0.2: 0.07 ms, 11 frames)
SMOOTHING = 0.1
#: keys that move the slice or turn the camera while held
MOTION_KEYS = ("K_q", "K_e", "K_z", "K_c", "K_LEFT", "K_RIGHT", "K_UP", "K_DOWN")
YAW, PITCH = 0.35, 0.42  # the 3-D views' default camera turn, radians


@dataclass
class Grab:
    handle: int
    local: np.ndarray  # grabbed point in the body frame (n,)
    depth: float  # camera depth of the grab point (3-D views)


class App:
    """One window (or off-screen surface) showing one scene; see the module notes."""

    def __init__(self, pygame: Any, dim: int, scene: str, size: tuple[int, int], bodies: int,
                 headless: bool = False) -> None:
        from ndrigid.core.geometry.slicing import orbit_view

        from . import scenes

        self.pg = pygame
        self.dim, self.size, self.count, self.headless = dim, size, bodies, headless
        self.scene_names = scenes.scene_names()
        self.scene_name = scene
        self.offsets = np.zeros(max(0, dim - 3) if dim >= 4 else (1 if dim == 3 else 0))
        self.yaw, self.pitch, self.perspective = YAW, PITCH, True
        self.inset_view = orbit_view(0.7, 0.45)
        self.paused, self.show_help, self.step_once = False, False, False
        self.grab: Grab | None = None
        self.mouse = (0, 0)
        self.step_times: list[float] = []
        self.step_ema: float | None = None  # smoothed step time, seconds
        self.slow_ema = 1.0  # smoothed wall seconds per simulated second
        self.steps_last_frame = 0
        self.tapped: set[int] = set()  # motion keys pressed since the last frame
        self.inset_ring: np.ndarray | None = None  # the slice outline in the inset, inset pixels
        self.clock_fps = 0.0
        self.font = pygame.font.Font(None, max(14, size[1] // 30))
        self.small = pygame.font.Font(None, max(12, size[1] // 40))
        self.world: Any = None
        self._view: Any = None  # the drawing helper (see view())
        self.reset()

    # -- scene ------------------------------------------------------------------------------------

    def reset(self) -> None:
        from . import scenes
        from .world import DemoWorld

        if self.world is not None:
            self.world.close()
        self.world = DemoWorld(self.dim)
        self.info = scenes.build_scene(self.scene_name, self.world, self.count)
        self.world.physics.bridge.stepper.max_steps_per_frame = MAX_STEPS_PER_FRAME
        self.t = 0.0
        self.step_ema = None
        self.slow_ema = 1.0
        self.grab = None
        self._view = None

    def switch(self, name: str) -> None:
        """Show another scene, with the slice back at the hidden axes' 0 and the camera at its
        default turn."""
        self.scene_name = name
        self.offsets[:] = 0.0
        self.yaw, self.pitch = YAW, PITCH
        self.reset()

    def clamp_offsets(self) -> None:
        """Keep the slice inside the scene's room (beyond it the slice would cut only wall)."""
        if not len(self.offsets):
            return
        lo, hi = self.info.bounds
        first = self.dim - len(self.offsets)
        self.offsets[:] = np.clip(self.offsets, lo[first:], hi[first:])

    @property
    def sim(self) -> Any:
        return self.world.sim

    def flat(self) -> Any:
        from ndrigid.core.geometry.slicing import axis_flat

        return axis_flat(self.dim, list(self.offsets))

    # -- stepping ---------------------------------------------------------------------------------

    def advance(self, seconds: float) -> int:
        """Physics for a frame of ``seconds`` wall time: at most MAX_STEPS_PER_FRAME fixed steps
        (exactly one headless, or for a single step while paused). Returns the steps taken."""
        if self.paused and not self.step_once:
            self.steps_last_frame = 0
            return 0
        single = self.step_once or self.headless
        self.step_once = False
        if self.info.tick is not None:
            self.info.tick(self.world, self.t)
        self._spring()
        if single:
            self.world.step(None)
            steps = 1
        else:
            self.world.step(seconds)
            steps = int(self.world.physics.steps_last_frame)
        self.steps_last_frame = steps
        self.t += steps * STEP
        if steps:
            ms = float(self.sim.timings.total)
            self.step_times.append(ms)
            self.step_ema = ms if self.step_ema is None else self.step_ema + SMOOTHING * (ms - self.step_ema)
        if not single and seconds > 0:
            ratio = seconds / max(steps * STEP, 0.5 * STEP)
            self.slow_ema += SMOOTHING * (ratio - self.slow_ema)
        return steps

    def slow_motion(self) -> float | None:
        """How many times slower than real time the world runs (None: it keeps up)."""
        # 15 % behind real time: frames at the step rate give exactly 1.0 (test_demo_frame.py)
        return self.slow_ema if self.slow_ema > 1.15 and not self.paused else None

    def frame(self, seconds: float, events: list[Any] | None = None) -> bool:
        """One frame of the window loop: the events (default: pygame's queue), held and tapped
        keys, then the physics. False means quit."""
        running = True
        for ev in self.pg.event.get() if events is None else events:
            running = self.handle_event(ev) and running
        self.held_keys(seconds)
        self.advance(seconds)
        return running

    def _spring(self) -> None:
        """A damped spring from the grabbed point to the mouse, plus the body's weight (so it holds)."""
        g = self.grab
        if g is None:
            return
        sim = self.sim
        try:
            R = sim.rotation(g.handle)
        except ValueError:
            self.grab = None
            return
        p = sim.position(g.handle) + R @ g.local
        target = self.mouse_world(g.depth)
        if target is None:
            return
        m = 1.0 / float(sim.bodies.inv_mass[sim.row(g.handle)])
        k, c = 60.0, 10.0
        force = m * (k * (target - p) - c * sim.velocity(g.handle) - sim.gravity)
        sim.apply_force(g.handle, force, point=p)

    # -- screen mapping ---------------------------------------------------------------------------

    def scale(self) -> float:
        return self.size[0] / self.info.span

    def to_screen(self, xy: np.ndarray) -> np.ndarray:
        """Pixels (..., 2) of view-plane points (..., 2) (slice coordinates in flat views)."""
        cx, cy = self.size[0] / 2, self.size[1] / 2
        s = self.scale()
        return np.stack([cx + (xy[..., 0] - self.info.centre[0]) * s,
                         cy - (xy[..., 1] - self.info.centre[1]) * s], axis=-1)

    def from_screen(self, px: tuple[int, int]) -> np.ndarray:
        cx, cy = self.size[0] / 2, self.size[1] / 2
        s = self.scale()
        return np.array([(px[0] - cx) / s + self.info.centre[0], -(px[1] - cy) / s + self.info.centre[1]])

    def look(self) -> tuple[float, float]:
        """(x_0, x_1) at the middle of the view: the scene's centre, or in 3-D views the point the
        camera looks at (``SceneInfo.solid_height``, lower, as the camera looks down on it)."""
        c = self.info.centre
        if self.flat().slice_dim == 3 and self.info.solid_height is not None:
            return (c[0], self.info.solid_height)
        return (c[0], c[1])

    def camera(self) -> Any:
        from ndrigid.core.geometry.slicing import make_camera, orbit_view

        target = np.array([*self.look(), 0.0])
        return make_camera(orbit_view(self.yaw, self.pitch), target, self.info.span * 1.6, self.perspective)

    def project3(self, P: np.ndarray, cam: Any) -> tuple[np.ndarray, np.ndarray]:
        """Pixels (P, 2) and depths (P,) of 3-D slice points in the main 3-D view."""
        from ndrigid.core.geometry.slicing import project_points

        xy, depth = project_points(P, cam)
        s = self.scale()
        return np.stack([self.size[0] / 2 + xy[:, 0] * s, self.size[1] / 2 - xy[:, 1] * s], axis=1), depth

    def mouse_ray(self) -> tuple[np.ndarray, np.ndarray]:
        """Eye ray through the mouse pixel in 3-D slice coordinates: origin (3,), unit direction (3,)."""
        cam = self.camera()
        s = self.scale()
        q = np.array([(self.mouse[0] - self.size[0] / 2) / s, -(self.mouse[1] - self.size[1] / 2) / s, 0.0])
        on_plane = cam.target + q @ cam.view
        if cam.perspective:
            o = cam.eye
            d = on_plane - o
        else:
            o = on_plane + cam.distance * cam.view[2]
            d = -cam.view[2]
        return o, d / np.linalg.norm(d)

    def mouse_world(self, depth: float) -> np.ndarray | None:
        """World point under the mouse: in the slice plane (flat views) or at ``depth`` (3-D views)."""
        flat = self.flat()
        m = flat.slice_dim
        if m == 2:
            return flat.to_world(self.from_screen(self.mouse))
        o, d = self.mouse_ray()
        cam = self.camera()
        along = float(d @ -cam.view[2])
        if along <= 1e-9:
            return None
        return flat.to_world(o + d * (depth / along))

    # -- input ------------------------------------------------------------------------------------

    def pick(self) -> None:
        from ndrigid.core import DYNAMIC, HalfSpace
        from ndrigid.core.world.queries import bodies_containing_point, raycast_all

        sim, flat = self.sim, self.flat()
        handle, point, depth = None, None, 0.0
        if flat.slice_dim == 2:
            x = flat.to_world(self.from_screen(self.mouse))
            hits = [h for h in bodies_containing_point(sim, x).tolist()
                    if sim.bodies.kind[sim.row(h)] == DYNAMIC]
            if hits:
                handle, point = hits[0], x
        else:
            o, d = self.mouse_ray()
            # the room's walls (half-spaces) are drawn as low kerbs and the eye is outside them:
            # the ray passes through them, as the view does, and stops at the first other body
            hits = [h for h in raycast_all(sim, flat.to_world(o), d @ flat.frame)
                    if not isinstance(sim.shape(h.handle), HalfSpace)]
            hit = hits[0] if hits else None
            if hit is not None and sim.bodies.kind[sim.row(hit.handle)] == DYNAMIC:
                handle, point = hit.handle, hit.point
                cam = self.camera()
                depth = float((flat.to_slice(hit.point) - cam.eye) @ -cam.view[2])
        if handle is not None and point is not None:
            local = sim.rotation(handle).T @ (point - sim.position(handle))
            self.grab = Grab(handle, local, depth)

    def handle_event(self, ev: Any) -> bool:
        """React to one pygame event; False means quit."""
        pg = self.pg
        if ev.type == pg.QUIT:
            return False
        if ev.type == pg.MOUSEMOTION:
            if ev.buttons[2] and self.dim >= 4:
                self.yaw += ev.rel[0] * 0.01
                self.pitch = float(np.clip(self.pitch + ev.rel[1] * 0.01, -1.4, 1.4))
            self.mouse = ev.pos
        elif ev.type == pg.MOUSEBUTTONDOWN and ev.button == 1:
            self.mouse = ev.pos
            self.pick()
        elif ev.type == pg.MOUSEBUTTONUP and ev.button == 1:
            self.grab = None  # the body keeps the spring's velocity: a throw
        elif ev.type == pg.KEYDOWN:
            k = ev.key
            if k in self._motion_keys():
                self.tapped.add(k)  # a tap shorter than a frame still moves (see held_keys)
            if k == pg.K_ESCAPE:
                return False
            if k == pg.K_SPACE:
                self.paused = not self.paused
            elif k == pg.K_PERIOD:
                self.step_once = True
            elif k == pg.K_r:
                self.reset()
            elif k == pg.K_TAB:
                i = self.scene_names.index(self.scene_name)
                self.switch(self.scene_names[(i + 1) % len(self.scene_names)])
            elif pg.K_1 <= k <= pg.K_9 and k - pg.K_1 < len(self.scene_names):
                self.switch(self.scene_names[k - pg.K_1])
            elif k == pg.K_h or k == pg.K_F1:
                self.show_help = not self.show_help
            elif k == pg.K_p:
                self.perspective = not self.perspective
            elif pg.key.name(k) in self.info.keys:  # the scene's own keys (SceneInfo.keys)
                self.info.keys[pg.key.name(k)][1](self.world)
        return True

    def _motion_keys(self) -> set[int]:
        return {getattr(self.pg, name) for name in MOTION_KEYS}

    def held_keys(self, seconds: float) -> None:
        """Move the slice and turn the camera by the keys held now or tapped since the last frame
        (a tap moves at least one step's worth, so no key press is lost between frames)."""
        pg = self.pg
        pressed = pg.key.get_pressed()
        tapped, self.tapped = self.tapped, set()
        seconds = max(seconds, STEP) if tapped else seconds

        def down(k: int) -> int:
            return int(bool(pressed[k]) or k in tapped)

        rate = 0.8 * seconds
        if len(self.offsets):
            self.offsets[-1] += rate * (down(pg.K_e) - down(pg.K_q))
            if len(self.offsets) > 1:
                self.offsets[0] += rate * (down(pg.K_c) - down(pg.K_z))
            self.clamp_offsets()
        self.yaw += 1.5 * seconds * (down(pg.K_RIGHT) - down(pg.K_LEFT))
        self.pitch = float(np.clip(self.pitch + 1.5 * seconds * (down(pg.K_DOWN) - down(pg.K_UP)), -1.4, 1.4))

    # -- drawing ----------------------------------------------------------------------------------

    def draw(self, surf: Any) -> None:
        self.draw_scene(surf)
        self.draw_status(surf)
        if self.show_help:
            self.draw_help(surf)

    def draw_scene(self, surf: Any) -> None:
        """The scene's view (and the 3-D world's inset) without the title and status bars."""
        from . import palette as P

        surf.fill(P.NIGHT_SLATE)
        if self.flat().slice_dim == 2:
            self.draw_flat(surf)
            if self.dim == 3:
                self.draw_inset(surf)
        else:
            self.draw_solid(surf)

    def view(self) -> Any:
        """The public drawing helper (ndrigid.adapters.pygame_draw), kept across frames (its
        half-space regions are cached) and brought up to date with the app's slice and camera."""
        from ndrigid.adapters.pygame_draw import SliceView

        from . import palette as P

        v = self._view
        if v is None or v.sim is not self.sim:
            v = self._view = SliceView(self.sim, self.flat(), span=self.info.span, pygame=self.pg,
                                       colours=self.world.colours, static_colour=P.BEDROCK,
                                       outline=P.OUTLINE_INK)
        v.flat, v.span, v.centre = self.flat(), self.info.span, self.look()
        v.yaw, v.pitch, v.perspective = self.yaw, self.pitch, self.perspective
        v.colours = self.world.colours
        v.highlight = {self.grab.handle} if self.grab else set()
        return v

    def poses(self) -> tuple[np.ndarray, np.ndarray] | None:
        """Poses to draw: interpolated between the last two fixed steps by the banked fraction of a
        step (the adapter's FixedStepper), so motion stays smooth whatever the frame rate. Headless
        frames take exactly one step each and draw the poses it reached (None: the current ones)."""
        if self.headless:
            return None
        return self.world.physics.bridge.stepper.interpolated()

    def wall_box(self, axes: list[int], height: float | None = None, thick: float = 0.4,
                 below: float = 1.5) -> tuple[np.ndarray, np.ndarray]:
        """The box that clips the room's walls (half-spaces) when drawn, on the world ``axes``:
        ``thick`` metres outside the room on every side, ``below`` under its floor, and up to
        ``height`` (None: the ceiling's outside)."""
        lo, hi = self.info.bounds
        a, b = lo[axes] - thick, hi[axes] + thick
        a[1] = lo[1] - below
        if height is not None:
            b[1] = height
        return a, b

    def draw_flat(self, surf: Any) -> None:
        """2-D world or 2-D slice: polygons, discs with a turning mark, clipped half-spaces (the
        room's walls drawn 0.4 m thick)."""
        self.view().draw(surf, poses=self.poses(), region=self.wall_box([0, 1]))
        self.draw_lines(surf)
        if self.grab is not None:
            self._draw_spring(surf)

    #: a scene's lines (ropes) are drawn where they lie within this distance (m) of the slice
    LINE_REACH = 0.5

    def draw_lines(self, surf: Any) -> None:
        """The scene's polylines (:attr:`SceneInfo.lines`, ropes between joint anchors) over the
        bodies, in the flat views and the 3-D views alike, where they lie near the slice."""
        if self.info.lines is None:
            return
        flat = self.flat()
        cam = self.camera() if flat.slice_dim == 3 else None
        for points, colour in self.info.lines(self.world):
            off = (points - flat.point) @ flat.normals.T
            if len(off.T) and np.abs(off).max() > self.LINE_REACH:
                continue
            s = flat.to_slice(points)
            if cam is None:
                px = self.to_screen(s)
            else:
                px, depth = self.project3(s, cam)
                if np.any(depth <= 0):
                    continue
            self.pg.draw.lines(surf, colour, False, px.tolist(), 2)

    def _draw_spring(self, surf: Any) -> None:
        from . import palette as P

        g, sim, flat = self.grab, self.sim, self.flat()
        assert g is not None
        p = sim.position(g.handle) + sim.rotation(g.handle) @ g.local
        if flat.slice_dim == 2:
            a = self.to_screen(flat.to_slice(p))
        else:
            a = self.project3(flat.to_slice(p)[None], self.camera())[0][0]
        self.pg.draw.line(surf, P.SIGNAL_AMBER, a.tolist(), self.mouse, 2)
        self.pg.draw.circle(surf, P.SIGNAL_AMBER, self.mouse, 4)

    def draw_solid(self, surf: Any) -> None:
        """4-D and 5-D: the 3-D slice, shaded, back faces removed, painter's order."""
        # the room's walls as low kerbs (0.35 m), so they mark the room without hiding it
        box = self.wall_box([0, 1, 2], height=0.35, thick=0.3, below=1.0)
        self.view().draw(surf, poses=self.poses(), region=box, camera=self.camera())
        self.draw_lines(surf)
        if self.grab is not None:
            self._draw_spring(surf)

    def draw_inset(self, surf: Any) -> None:
        """3-D worlds: the whole world projected in a corner, with the slice plane x_2 = w outlined."""
        from ndrigid.core.geometry.slicing import axis_flat, make_camera, project_points

        from . import palette as P

        pg = self.pg
        W, H = self.size[0] // 3, self.size[1] // 3
        x0, y0 = self.size[0] - W - 8, 8
        inset = pg.Surface((W, H))
        inset.fill(P.DEEP_SLATE)
        lo, hi = self.info.bounds
        c = self.info.centre
        top = min(float(hi[1]), c[1] + self.info.span * 0.3)
        # an orthographic camera on the room's middle, scaled so the whole room fits the inset
        target = np.array([(lo[0] + hi[0]) / 2, (lo[1] + top) / 2, 0.0])
        cam = make_camera(self.inset_view, target, self.info.span, False)
        room = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], top) for z in (lo[2], hi[2])])
        xy, _ = project_points(room, cam)
        s = min((W - 12) / (2 * np.abs(xy[:, 0]).max()), (H - 24) / (2 * np.abs(xy[:, 1]).max()))
        span = W / s
        view = self.view()
        whole = replace(view, flat=axis_flat(3, []), highlight=set(view.highlight), span=span)
        whole._regions = view._regions
        box = self.wall_box([0, 1, 2], height=0.35, thick=0.3, below=0.5)
        whole.draw(inset, poses=self.poses(), region=box, camera=cam, thin=True)
        # the slice plane x_2 = w across the room, clipped to the inset
        w = float(self.offsets[0])
        corners = np.array([[lo[0], lo[1], w], [hi[0], lo[1], w], [hi[0], top, w], [lo[0], top, w]])
        xy, _ = project_points(corners, cam)
        ring = np.stack([W / 2 + xy[:, 0] * s, H / 2 - xy[:, 1] * s], axis=1)
        ring = clip_polygon(ring, (0, 0), (W - 1, H - 1))
        self.inset_ring = ring
        if len(ring) >= 3:
            pg.draw.polygon(inset, P.SIGNAL_AMBER, ring.tolist(), 1)
        pg.draw.rect(inset, P.FADED_CHALK, inset.get_rect(), 1)
        surf.blit(inset, (x0, y0))
        surf.blit(self.small.render("whole 3-D world", True, P.FADED_CHALK), (x0 + 6, y0 + H - 16))

    def draw_status(self, surf: Any) -> None:
        from . import palette as P
        from . import scenes

        sim = self.sim
        contacts = sim.contacts.count if sim.contacts is not None else 0
        names = "x%d" if self.dim >= 3 else ""
        first = self.dim - len(self.offsets)
        sl = "  ".join(f"{names % (first + i)}={v:+.2f}" for i, v in enumerate(self.offsets))
        fps = "headless" if self.headless else f"{self.clock_fps:5.1f} fps"
        step = 1e3 * (self.step_ema if self.step_ema is not None else sim.timings.total)
        story = ""
        if self.info.progress is not None:
            done, total = self.info.progress(self.world)
            story = f"   {self.info.progress_label} {done}/{total}"
        text = (f"{fps}   step {step:5.2f} ms   bodies {sim.count}   "
                f"contacts {contacts}   {self.dim}-D   slice {sl or 'none (whole world)'}{story}"
                f"{'   PAUSED' if self.paused else ''}")
        bar = self.pg.Surface((self.size[0], self.font.get_height() + 8))
        bar.fill(P.DEEP_SLATE)
        bar.blit(self.font.render(text, True, P.CHALK), (8, 4))
        surf.blit(bar, (0, self.size[1] - bar.get_height()))
        title = scenes.scene_title(self.scene_name)
        head = self.pg.Surface((self.size[0], self.title_height()))
        head.fill(P.DEEP_SLATE)
        head.blit(self.small.render(f"{title}   (H: help)", True, P.FADED_CHALK), (8, 4))
        slow = self.slow_motion()
        if slow is not None:
            mark = self.small.render(f"slow motion x {slow:.1f}", True, P.SIGNAL_AMBER)
            head.blit(mark, (self.size[0] - mark.get_width() - 8, 4))
        surf.blit(head, (0, 0))

    def title_height(self) -> int:
        """Pixels of the title bar at the top of the window."""
        return self.small.get_height() + 8

    def help_layout(self) -> list[tuple[tuple[int, int], tuple[int, int]]]:
        """Panel pixels of each help row's key cell and text cell: the text column starts at one
        x for every row, past the widest key."""
        lh = self.font.get_height() + 2
        col = 12 + max(self.font.size(k)[0] for k, _ in HELP) + 24
        return [((12, 6 + lh * (i + 1)), (col, 6 + lh * (i + 1))) for i in range(len(HELP))]

    def draw_help(self, surf: Any) -> None:
        from . import palette as P

        lh = self.font.get_height() + 2
        layout = self.help_layout()
        width = max(cell[0] + self.font.size(text)[0]
                    for (_, cell), (_, text) in zip(layout, HELP, strict=True))
        panel = self.pg.Surface((min(width + 12, self.size[0] - 16), lh * (len(HELP) + 2)))
        panel.fill(P.DEEP_SLATE)
        panel.blit(self.font.render("keys", True, P.SIGNAL_AMBER), (12, 6))
        for (key_at, text_at), (key, text) in zip(layout, HELP, strict=True):
            panel.blit(self.font.render(key, True, P.SIGNAL_AMBER), key_at)
            panel.blit(self.font.render(text, True, P.CHALK), text_at)
        surf.blit(panel, ((self.size[0] - panel.get_width()) // 2, int(self.size[1] * 0.12)))


def clip_polygon(ring: np.ndarray, lo: tuple[float, float], hi: tuple[float, float]) -> np.ndarray:
    """The part of the polygon ``ring`` (P, 2) inside the rectangle lo..hi (Sutherland and
    Hodgman, "Reentrant polygon clipping", CACM 17(1), 1974): one pass per edge of the rectangle."""
    pts = [np.asarray(p, dtype=float) for p in ring]
    for axis in (0, 1):
        for bound, sign in ((lo[axis], 1.0), (hi[axis], -1.0)):
            out: list[np.ndarray] = []
            for i, cur in enumerate(pts):
                prev = pts[i - 1]
                fc, fp = sign * (cur[axis] - bound), sign * (prev[axis] - bound)
                if (fc >= 0) != (fp >= 0):
                    out.append(prev + (cur - prev) * (fp / (fp - fc)))
                if fc >= 0:
                    out.append(cur)
            pts = out
            if not pts:
                return np.zeros((0, 2))
    return np.array(pts)


def _parse(argv: list[str] | None) -> argparse.Namespace:
    from . import scenes

    ap = argparse.ArgumentParser(prog="python -m ndrigid.demo", description="ndrigid scenes in 2-D to 5-D")
    ap.add_argument("--scene", default="rockfall", choices=[*scenes.scene_names(), "all"])
    ap.add_argument("--dim", type=int, default=4, choices=[0, 2, 3, 4, 5], help="dimension of the world")
    ap.add_argument("--bodies", type=int, default=18, help="dynamic bodies in the scene")
    ap.add_argument("--size", default="960x600", help="window size WxH")
    ap.add_argument("--headless", action="store_true", help="render off-screen PNG frames, no display")
    ap.add_argument("--frames", type=int, default=None,
                    help="frames to render when headless (default 120), steps per tile with --tour "
                         "(default 150)")
    ap.add_argument("--out", default=None,
                    help="headless output: a folder for frames (default out/demo), or with --teach / "
                         "--tour a .png file or a folder for teach_<a>d_<b>d.png / tour.png")
    ap.add_argument("--every", type=int, default=30, help="save every k-th frame (0: only the last)")
    ap.add_argument("--check", action="store_true",
                    help="run the scenes' physics (--scene, or all with --scene all; --dim, or 2-5 with "
                         "--dim 0) for --frames frames without drawing and print what the tests check")
    ap.add_argument("--seed", type=int, nargs="+", default=[7], help="scene seeds for --check")
    ap.add_argument("--teach", type=int, nargs="*", default=None, metavar="DIM",
                    help="the teaching scene: one box tumbling in two dimensions side by side (default "
                         "3 5) with live plots of energy, |L| and the momentum shares")
    ap.add_argument("--gyroscopic", default="split", choices=["split", "implicit"],
                    help="integrator of the teaching scene (Settings.gyroscopic)")
    ap.add_argument("--seconds", type=float, default=None,
                    help="simulated seconds of the headless teaching plot (default 20) or of the "
                         "tour's teaching tile (default 12)")
    ap.add_argument("--tour", action="store_true",
                    help="render every scene in 2-D to 5-D and the teaching scene to one contact sheet PNG")
    ap.add_argument("--tile", default="320x200", help="tile size WxH of the --tour sheet")
    ap.add_argument("--measure", type=float, default=None, metavar="SECONDS",
                    help="open the window and print the frame rate of each scene (--scene, or every "
                         "scene with --scene all; or of --teach) over SECONDS after 1 s of warm-up")
    return ap.parse_args(argv)


def check(scenes_: list[str], dims: list[int], bodies: int, frames: int, seeds: list[int]) -> None:
    """Print, per scene, dimension and seed, what :func:`ndrigid.demo.scenes.check_scene` measures."""
    from . import scenes

    for name, dim, seed in ((a, b, c) for a in scenes_ for b in dims for c in seeds):
        r = scenes.check_scene(name, dim, bodies, frames, seed)
        done, total = r["progress"] or (0, 0)
        med, top = r["step_ms"] or (0.0, 0.0)
        print(f"{name:9s} {dim}-D seed {seed}: {r['outside']} of {r['dynamic']} dynamic bodies outside "
              f"the room, "
              f"{r['in_slice']} in the default slice, {r['label']} {done}/{total}; "
              f"step median {med:.2f} ms, max {top:.2f} ms")


def run_headless(dim: int, scene: str, frames: int, out: str | Path, size: tuple[int, int] = (640, 400),
                 bodies: int = 18, every: int = 0) -> dict[str, Any]:
    """Render ``frames`` frames off-screen; save PNGs to ``out``; return the step-time summary.

    The result holds ``frames``, ``last`` (path of the last PNG), ``step_ms`` (mean, median, max of
    the Simulation's step time) and ``app`` (the App, for inspection).
    """
    os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
    os.environ.setdefault("PYGAME_HIDE_SUPPORT_PROMPT", "1")
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
    import pygame

    pygame.init()
    try:
        app = App(pygame, dim, scene, size, bodies, headless=True)
        surf = pygame.Surface(size)
        out = Path(out)
        out.mkdir(parents=True, exist_ok=True)
        last = out / f"{scene}_{dim}d_last.png"
        for f in range(frames):
            app.advance(1.0 / 60.0)
            if (every and f % every == 0) or f == frames - 1:
                app.draw(surf)
                pygame.image.save(surf, str(out / f"{scene}_{dim}d_{f:04d}.png" if f != frames - 1 else last))
        st = np.array(app.step_times) * 1e3
        summary = {"frames": frames, "last": last, "app": app,
                   "step_ms": {"mean": float(st.mean()), "median": float(np.median(st)),
                               "max": float(st.max())}}
    finally:
        pygame.quit()
    return summary


def _display_available() -> bool:
    """Whether a window can open: an explicit SDL video driver, a desktop platform, or an X11 /
    Wayland display on Linux."""
    if os.environ.get("SDL_VIDEODRIVER", "") not in ("", "dummy", "offscreen"):
        return True
    if os.environ.get("SDL_VIDEODRIVER") in ("dummy", "offscreen"):
        return False
    if sys.platform.startswith(("win", "darwin")):
        return True
    return bool(os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"))


def precompile_with_splash(pygame: Any, screen: Any, dim: int) -> bool:
    """Compile the dimension's kernels on a worker thread while the window shows the progress.

    A warm cache returns at once. Returns False when the window was closed meanwhile. The physics
    would compile on its first step anyway; doing it here keeps the window responsive and says
    why the first start takes a while.
    """
    import threading

    from ndrigid.core import kernels

    if not kernels.available():
        return True
    todo = [f for f in kernels.all_families() if not kernels.is_warm(f, dim)]
    if not todo:
        return True
    state = {"done": 0, "current": todo[0], "error": None}

    def work() -> None:
        try:
            def progress(family: str, n: int, done: int, total: int) -> None:
                state["done"] = done
                state["current"] = todo[done] if done < total else family
            kernels.precompile([dim], todo, progress)
        except Exception as exc:  # reported on the splash and stderr; the step then falls back
            state["error"] = exc

    worker = threading.Thread(target=work, name="ndrigid-precompile", daemon=True)
    worker.start()
    print(f"ndrigid: compiling {dim}-D kernels, first run only ({', '.join(todo)})", file=sys.stderr)
    font = pygame.font.Font(None, max(18, screen.get_height() // 22))
    clock = pygame.time.Clock()
    w, h = screen.get_size()
    while worker.is_alive():
        for ev in pygame.event.get():
            if ev.type == pygame.QUIT:
                return False
        screen.fill((18, 20, 26))
        text = f"compiling {dim}-D kernels, first run only: {state['current']} " \
               f"({state['done'] + 1}/{len(todo)})"
        img = font.render(text, True, (225, 228, 235))
        screen.blit(img, ((w - img.get_width()) // 2, h // 2 - 30))
        bar = pygame.Rect(w // 4, h // 2 + 10, w // 2, 12)
        pygame.draw.rect(screen, (70, 76, 90), bar, 1)
        fill = bar.copy()
        fill.width = int(bar.width * state["done"] / len(todo))
        pygame.draw.rect(screen, (120, 190, 140), fill)
        pygame.display.flip()
        clock.tick(15)
    if state["error"] is not None:
        print(f"ndrigid: compiling failed ({state['error']}); the first steps will retry", file=sys.stderr)
    return True


def _size(text: str, option: str) -> tuple[int, int] | None:
    try:
        w, h = (int(v) for v in text.lower().split("x"))
    except ValueError:
        w = h = 0
    if w < 80 or h < 80:
        print(f"{option}: expected WxH like 960x600 (at least 80x80), got {text!r}", file=sys.stderr)
        return None
    return w, h


def _png(out: str | None, default: str) -> Path:
    """``--out`` as a PNG path: the file itself if it ends in .png, else ``default`` in that folder."""
    if out is None:
        return Path("out/demo") / default
    p = Path(out)
    return p if p.suffix.lower() == ".png" else p / default


def window_loop(pygame: Any, screen: Any, app: Any, seconds: float | None = None,
                warmup: float = 0.0, busy: list[float] | None = None) -> list[float]:
    """The window's frame loop (events, physics, drawing, flip, at most 60 frames a second) until
    the app says quit, or for ``warmup`` + ``seconds`` of wall time. Returns the times
    (time.perf_counter) at which the frames after the warm-up were shown; ``busy`` gets the
    seconds each of those frames worked before the wait for the 60 Hz cap."""
    clock = pygame.time.Clock()
    shown: list[float] = []
    start = last = time.perf_counter()
    running = True
    while running:
        now = time.perf_counter()
        dt, last = min(now - last, 0.1), now
        running = app.frame(dt)
        app.draw(screen)
        pygame.display.flip()
        worked = time.perf_counter() - now
        clock.tick(60)
        app.clock_fps = clock.get_fps()
        end = time.perf_counter()
        if seconds is not None:
            if end - start >= warmup:
                shown.append(end)
                if busy is not None:
                    busy.append(worked)
            if end - start >= warmup + seconds:
                break
    return shown


def frame_rate(shown: list[float], busy: list[float] | None = None) -> dict[str, float]:
    """Frames per second, median and slowest frame (ms) of the times :func:`window_loop` returns,
    and the median work of a frame before the 60 Hz wait (ms; 0 without ``busy``)."""
    gaps = np.diff(np.asarray(shown))
    work = float(1e3 * np.median(busy)) if busy else 0.0
    if len(gaps) == 0:
        return {"fps": 0.0, "median_ms": 0.0, "max_ms": 0.0, "busy_ms": work}
    return {"fps": float(len(gaps) / (shown[-1] - shown[0])), "median_ms": float(1e3 * np.median(gaps)),
            "max_ms": float(1e3 * gaps.max()), "busy_ms": work}


def _measured(r: dict[str, float], seconds: float) -> str:
    return (f"{r['fps']:.1f} fps over {seconds:g} s, median frame {r['median_ms']:.1f} ms "
            f"(of which work {r['busy_ms']:.1f} ms, the rest waits for the 60 Hz cap), "
            f"slowest {r['max_ms']:.1f} ms")


def main(argv: list[str] | None = None) -> int:
    from . import scenes

    args = _parse(argv)
    for option, value, least in (("--measure", args.measure, 0.0), ("--seconds", args.seconds, 0.0),
                                 ("--frames", args.frames, 0)):
        if value is not None and not value > least:
            print(f"{option}: expected a number above {least}, got {value}", file=sys.stderr)
            return 2
    if args.check:
        check(scenes.scene_names() if args.scene == "all" else [args.scene],
              [2, 3, 4, 5] if args.dim == 0 else [args.dim], args.bodies, args.frames or 120, args.seed)
        return 0
    if args.tour:
        from .tour import TEACH_FRAMES, run_tour

        tile = _size(args.tile, "--tile")
        if tile is None:
            return 2
        teach = TEACH_FRAMES if args.seconds is None else max(1, int(round(args.seconds / STEP)))
        res = run_tour(_png(args.out, "tour.png"), frames=args.frames or 150, tile=tile, bodies=args.bodies,
                       teach_frames=teach)
        print(f"tour: {len(res['tiles'])} tiles, {res['size'][0]}x{res['size'][1]} pixels, {res['path']} "
              f"({res['path'].stat().st_size / 1e3:.0f} kB)")
        return 0
    teach_dims = None
    if args.teach is not None:
        from ndrigid.core import InputError, InputTypeError

        from .teach import DEFAULT_DIMS, check_dims

        try:
            teach_dims = check_dims(args.teach or DEFAULT_DIMS)
        except (InputError, InputTypeError) as exc:
            print(f"--teach: {exc}", file=sys.stderr)
            return 2
    elif (args.scene == "all" and args.measure is None) or args.dim == 0:
        print("--scene all goes with --check or --measure, --dim 0 with --check only", file=sys.stderr)
        return 2
    size = _size(args.size, "--size")
    if size is None:
        return 2
    w, h = size
    if args.measure is not None and not _display_available():
        print("--measure needs a real window and no display was found (under a virtual X server: "
              "xvfb-run -a -s '-screen 0 1280x800x24' python -m ndrigid.demo ...)", file=sys.stderr)
        return 2
    if not args.headless and not _display_available():
        print("no display found: rendering headless frames instead (pass --headless to say so)",
              file=sys.stderr)
        args.headless = True
    if args.headless and teach_dims is not None:
        from .teach import render_teach

        a, b = teach_dims
        res = render_teach(teach_dims, 20.0 if args.seconds is None else args.seconds,
                           _png(args.out, f"teach_{a}d_{b}d.png"), (w, h), args.gyroscopic)
        for d, tb in zip(res["data"], res["app"].tumbles, strict=True):
            e = np.abs(d["energy"] / tb.energy0 - 1).max()
            m = np.abs(d["momentum"] / tb.momentum0 - 1).max()
            print(f"{tb.dim}-D, gyroscopic '{tb.mode}', {d['time'][-1]:.1f} s: largest change of the "
                  f"kinetic energy {e:.1e}, of |L| {m:.1e} (relative)")
        print(f"plot: {res['path']}")
        return 0
    if args.headless:
        res = run_headless(args.dim, args.scene, args.frames or 120, args.out or "out/demo", (w, h),
                           args.bodies, args.every)
        s = res["step_ms"]
        print(f"{args.scene} {args.dim}-D: {res['frames']} frames, step time mean {s['mean']:.2f} ms, "
              f"median {s['median']:.2f} ms, max {s['max']:.2f} ms; last frame {res['last']}")
        return 0
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")  # the demo makes no sound
    os.environ.setdefault("PYGAME_HIDE_SUPPORT_PROMPT", "1")
    import pygame

    pygame.init()
    screen = pygame.display.set_mode((w, h))
    pygame.display.set_caption("ndrigid")
    if teach_dims is not None:
        from .teach import TeachApp

        app: Any = TeachApp(pygame, teach_dims, (w, h), args.gyroscopic)
        if args.measure is not None:
            busy: list[float] = []
            r = frame_rate(window_loop(pygame, screen, app, args.measure, warmup=1.0, busy=busy), busy)
            print(f"teach {teach_dims[0]}-D and {teach_dims[1]}-D in a {w}x{h} window "
                  f"({pygame.display.get_driver()}): {_measured(r, args.measure)}")
        else:
            window_loop(pygame, screen, app)
        pygame.quit()
        return 0
    if not precompile_with_splash(pygame, screen, args.dim):
        pygame.quit()
        return 0
    if args.measure is not None:
        for name in scenes.scene_names() if args.scene == "all" else [args.scene]:
            app = App(pygame, args.dim, name, (w, h), args.bodies)
            busy = []
            r = frame_rate(window_loop(pygame, screen, app, args.measure, warmup=1.0, busy=busy), busy)
            st = np.array(app.step_times[60:] or app.step_times) * 1e3
            print(f"{name:9s} {args.dim}-D in a {w}x{h} window ({pygame.display.get_driver()}): "
                  f"{_measured(r, args.measure)}; physics step median {np.median(st):.2f} ms")
            app.world.close()
        pygame.quit()
        return 0
    app = App(pygame, args.dim, args.scene, (w, h), args.bodies)
    window_loop(pygame, screen, app)
    pygame.quit()
    return 0
