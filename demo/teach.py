"""The teaching scene: one tumbling box in two dimensions side by side, with live plots.

The same box (half-extents 0.15, 0.4 and 0.7 m along e_0, e_1, e_2; in more than three dimensions
the further axes take the middle extent, 0.4 m) floats free of gravity and is spun at 3 rad/s in
its e_0^e_2 plane, with a small nudge in every other plane. Its body frame is its principal frame
(a box's inertia is diagonal on the blades e_i^e_j, with plane moments m (c_i + c_j), c_i = h_i^2 / 3
the covariance per unit mass along axis i).

Why the spin tumbles. Linearising the free body's Euler equations dL/dt = [L, W] (3-D: Landau and
Lifshitz, *Mechanics*, section 37; n-D: Ratiu, "The motion of the free n-dimensional rigid body",
Indiana Univ. Math. J. 29, 1980) about a steady spin W in the plane e_i^e_j splits the nudge into
one pair of planes (e_i^e_k, e_j^e_k) per other axis k, and that pair grows exactly when c_k lies
between c_i and c_j: the intermediate-axis rule of the 3-D top, once per axis k. In 3-D only e_1
lies between e_0 and e_2, so the box flips about its middle axis again and again; in 5-D e_1, e_3
and e_4 all do, so three pairs of planes grow and the 5-D box tumbles through more of them. What
stays put in both: the kinetic energy and the world angular momentum bivector L (the free body's
conserved quantities, same references), which the plots show.

The plots (drawn with pygame lines, no plotting library): kinetic energy and |L| as relative
changes from their starting values, both dimensions in one strip each, and per dimension the
share of |L|^2 in each principal plane (L_body,ij^2 / |L|^2; they sum to 1). The spin plane is
drawn thick in amber.

The integrator is ``Settings(gyroscopic="split")`` (Lie-Poisson splitting, McLachlan 1993), which
the README and the ``Settings`` docstring document as keeping the world momentum to rounding and
the energy within 0.04 % with no drift; ``--gyroscopic implicit`` (the game default) shows the
other behaviour: the energy falls (by 14 % in 3-D and 16 % in 5-D over 10 s here) while L is
still kept.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from ndrigid.core import Box, InputError, InputTypeError, Settings, Simulation
from ndrigid.core.geometry.slicing import axis_flat

from . import palette as P

#: half-extents along e_0, e_1, e_2 (m); further axes take the middle one. Three distinct extents
#: make e_0^e_2 the middle principal plane of the three planes of e_0, e_1, e_2.
HALF = (0.15, 0.4, 0.7)
#: spin in the e_0^e_2 plane (rad/s) and the nudge in every other plane (fraction of SPIN).
#: Measured with :class:`Tumble` (split mode, 60 Hz, 20 s; the energy figures are also what
#: ``python -m ndrigid.demo --teach 3 5 --headless --seconds 10`` prints): the spin plane's share
#: first drops below one half at 3.1 s in 3-D and 1.7 s in 5-D, and again every 6.0 s in 3-D, so
#: a window shows a flip within seconds; the largest energy error over 10 s is 1.0e-5 (3-D) and
#: 2.0e-4 (5-D), half the documented 0.04 %. At 4 rad/s the 5-D error is 3.6e-4, too close to
#: it; at 2 rad/s the first 3-D flip waits 4.7 s. A nudge of 1 % delays the first 3-D flip to
#: 3.5 s, 5 % brings it to 2.6 s.
SPIN = 3.0
NUDGE = 0.02
#: seconds of history the live plots show (the window scrolls after that)
PLOT_SECONDS = 20.0
#: samples kept per body (ten minutes at 60 Hz); older ones are dropped in halves
MAX_SAMPLES = 36_000
#: the modes the scene offers (Settings.gyroscopic)
MODES = ("split", "implicit")
#: the pair of dimensions shown by default, and the range offered (a 2-D body turns in one
#: plane only, so it cannot tumble)
DEFAULT_DIMS = (3, 5)
MIN_DIM, MAX_DIM = 3, 6
STEP = 1.0 / 60.0


def check_dims(dims: Any) -> tuple[int, int]:
    """The two dimensions of the scene, validated (InputError / InputTypeError naming ``dims``)."""
    if isinstance(dims, (str, bytes)) or not isinstance(dims, Sequence):
        raise InputTypeError(f"dims: expected two dimensions from {MIN_DIM} to {MAX_DIM}, got {dims!r}")
    if len(dims) != 2:
        raise InputError(f"dims: expected two dimensions from {MIN_DIM} to {MAX_DIM}, got {len(dims)}: "
                         f"{list(dims)!r}")
    return check_dim("dims", dims[0]), check_dim("dims", dims[1])


def check_dim(name: str, d: Any) -> int:
    """One dimension of the scene, validated (InputError / InputTypeError naming ``name``)."""
    if isinstance(d, bool) or not isinstance(d, (int, np.integer)):
        raise InputTypeError(f"{name}: expected whole numbers from {MIN_DIM} to {MAX_DIM}, got {d!r}")
    if not MIN_DIM <= int(d) <= MAX_DIM:
        why = " (a 2-D body turns in one plane only, so it cannot tumble)" if int(d) == 2 else ""
        raise InputError(f"{name}: expected a dimension from {MIN_DIM} to {MAX_DIM}{why}, got {int(d)}")
    return int(d)


def half_extents(dim: int) -> np.ndarray:
    """(dim,) half-extents of the teaching box: HALF, then the middle extent on further axes."""
    return np.array([*HALF, *([HALF[1]] * (dim - 3))])


def plane_label(pair: Sequence[int]) -> str:
    return f"e{int(pair[0])}^e{int(pair[1])}"


class Tumble:
    """One free box in ``dim`` dimensions spun near its middle principal plane, and its plot data.

    ``spin`` (rad/s) goes into the plane e_i^e_j of ``plane`` (default e_0^e_2, the middle one),
    ``nudge`` times it into every other plane.

    :meth:`step` advances one fixed step and records (as the constructor does for the start) the
    time, the kinetic energy (J), the norm of the world angular momentum bivector about the centre
    of mass (kg m^2/s) and the shares of |L|^2 in the principal planes (the blades, in the
    algebra's order); :meth:`data` returns them as arrays. ``energy0`` and ``momentum0`` are the
    values at the start.
    """

    def __init__(self, dim: int, gyroscopic: str = "split", spin: float = SPIN, nudge: float = NUDGE,
                 plane: tuple[int, int] = (0, 2)) -> None:
        dim = check_dim("dim", dim)
        if gyroscopic not in MODES:
            raise InputError(f"gyroscopic: expected one of {list(MODES)}, got {gyroscopic!r}")
        if (not isinstance(plane, (tuple, list)) or len(plane) != 2
                or not all(isinstance(a, int) and not isinstance(a, bool) for a in plane)
                or not 0 <= plane[0] < plane[1] < dim):
            raise InputError(f"plane: expected two axes (i, j) with 0 <= i < j < {dim}, got {plane!r}")
        spin = float(spin)
        nudge = float(nudge)
        if not np.isfinite(spin) or not np.isfinite(nudge):
            raise InputError(f"spin, nudge: expected finite numbers, got {spin!r}, {nudge!r}")
        self.dim, self.mode = dim, gyroscopic
        self.sim = Simulation(dim, gravity=np.zeros(dim),
                              settings=Settings(gyroscopic=gyroscopic, sleep_enabled=False))
        alg = self.sim.alg
        self.pairs = alg.pairs
        self.labels = [plane_label(p) for p in alg.pairs]
        hit = (alg.pairs[:, 0] == plane[0]) & (alg.pairs[:, 1] == plane[1])
        self.spin_plane = int(np.flatnonzero(hit)[0])
        B = np.full(alg.k, nudge * spin)
        B[self.spin_plane] = spin
        self.half = half_extents(dim)
        self.handle = self.sim.add_body(Box(self.half), mass=1.0, angular_velocity=B)
        body = self.sim.inertia(self.handle, "body")
        # the shares are read in the body frame, which is the principal frame only if the body
        # inertia is diagonal on the blades (true of a box: see the module notes)
        assert np.allclose(body, np.diag(np.diag(body)), atol=1e-12 * float(np.abs(body).max()))
        self.moments = np.diag(body).copy()
        self.energy0 = self.sim.kinetic_energy(self.handle)
        self.momentum0 = float(np.linalg.norm(self.world_momentum()))
        self._t: list[float] = []
        self._e: list[float] = []
        self._l: list[float] = []
        self._s: list[np.ndarray] = []
        self.t = 0.0
        self._record()

    def world_momentum(self) -> np.ndarray:
        """(k,) world angular momentum bivector about the centre of mass."""
        return self.sim.angular_momentum(self.handle, about="com")

    def shares(self) -> np.ndarray:
        """(k,) share of |L|^2 in each principal plane (sums to 1)."""
        Lb = self.sim.body_angular_momentum(self.handle)
        return Lb * Lb / float(Lb @ Lb)

    def step(self) -> None:
        self.sim.step()
        self.t += self.sim.settings.dt
        self._record()

    def _record(self) -> None:
        self._t.append(self.t)
        self._e.append(self.sim.kinetic_energy(self.handle))
        self._l.append(float(np.linalg.norm(self.world_momentum())))
        self._s.append(self.shares())
        if len(self._t) > MAX_SAMPLES:
            for col in (self._t, self._e, self._l, self._s):
                del col[: MAX_SAMPLES // 2]

    def data(self) -> dict[str, np.ndarray]:
        """The plot data: ``time`` (T,) s, ``energy`` (T,) J, ``momentum`` (T,) |L| in kg m^2/s and
        ``shares`` (T, k): the state at the start (t = 0) and after every step."""
        k = self.sim.alg.k
        return {"time": np.array(self._t), "energy": np.array(self._e), "momentum": np.array(self._l),
                "shares": np.array(self._s).reshape(len(self._s), k)}


# -- drawing ---------------------------------------------------------------------------------------

#: the two dimensions' colours in the energy and momentum strips
DIM_COLOURS = (P.MOSS_LAMP, P.FLINT_ROSE)
BOX_COLOUR = P.QUARRY_OCHRE
#: metres across a body panel. The box's corners lie 0.82 m (3-D) and 1.0 m (5-D) from its centre,
#: 1.2 m on screen at most with the perspective of a camera 1.6 spans away; a panel of the default
#: 960x600 window is 480x290 pixels, 2.4 m tall at this span, so the box stays inside at any turn
SPAN = 4.0


@dataclass
class Layout:
    """Pixel rectangles (x, y, w, h) of the teaching view's parts on a surface."""

    bodies: tuple[tuple[int, int, int, int], tuple[int, int, int, int]]
    shares: tuple[tuple[int, int, int, int], tuple[int, int, int, int]]
    energy: tuple[int, int, int, int]
    momentum: tuple[int, int, int, int]


def layout(size: tuple[int, int], top: int = 0, bottom: int = 0) -> Layout:
    """Where the parts go on a surface of ``size`` (``top`` / ``bottom`` pixels kept for bars).

    Tall surfaces (width up to twice the height): the two bodies side by side on top, each one's
    share plot below it, and the energy and momentum strips side by side at the bottom. Wide ones
    (the tour's tile): the two bodies (a quarter of the width each at most), then a column of the
    four plots.
    """
    w, h = int(size[0]), int(size[1]) - top - bottom
    g = 6
    if w > 2 * h:
        side = min(h, (w - 3 * g) // 4)
        col = w - 2 * side - 3 * g
        x2 = 2 * side + 2 * g
        ph = (h - 3 * g) // 4
        rows = [top + i * (ph + g) for i in range(4)]
        return Layout(bodies=((0, top, side, h), (side + g, top, side, h)),
                      shares=((x2, rows[2], col, ph), (x2, rows[3], col, ph)),
                      energy=(x2, rows[0], col, ph), momentum=(x2, rows[1], col, ph))
    half = (w - g) // 2
    bh = int(h * 0.5)
    ph = (h - bh - 2 * g) // 2
    y1, y2 = top + bh + g, top + bh + ph + 2 * g
    return Layout(bodies=((0, top, half, bh), (half + g, top, half, bh)),
                  shares=((0, y1, half, ph), (half + g, y1, half, ph)),
                  energy=(0, y2, half, ph), momentum=(half + g, y2, half, ph))


def share_colours(moments: np.ndarray, spin_plane: int) -> list[tuple[int, int, int]]:
    """One colour per principal plane: a ramp from river stone (smallest moment) to flint rose
    (largest), the spin plane in signal amber."""
    order = np.argsort(np.argsort(moments, kind="stable"), kind="stable")
    t = order / max(1, len(moments) - 1)
    cols = [P.mix(P.RIVER_STONE, P.FLINT_ROSE, float(v)) for v in t]
    cols[spin_plane] = P.SIGNAL_AMBER
    return cols


class TeachView:
    """Draws two :class:`Tumble` s and their plots into pygame surfaces (see the module notes)."""

    def __init__(self, pygame: Any, tumbles: tuple[Tumble, Tumble], font: Any, small: Any,
                 window: float | None = PLOT_SECONDS) -> None:
        from ndrigid.adapters.pygame_draw import SliceView

        self.pg, self.tumbles, self.font, self.small = pygame, tumbles, font, small
        self.window = window  # seconds the plots show, scrolling (None: the whole run so far)
        self.yaw, self.pitch = 0.6, 0.35
        self.views = []
        for tb in tumbles:
            n = tb.dim
            flat = axis_flat(n, [] if n == 3 else [0.0] * (n - 3))
            self.views.append(SliceView(tb.sim, flat, span=SPAN, pygame=pygame,
                                        colours={tb.handle: BOX_COLOUR}, outline=P.OUTLINE_INK))

    def draw(self, surf: Any, top: int = 0, bottom: int = 0) -> Layout:
        lay = layout(surf.get_size(), top, bottom)
        for tb, view, rect in zip(self.tumbles, self.views, lay.bodies, strict=True):
            self.draw_body(surf.subsurface(rect), tb, view)
        for tb, rect in zip(self.tumbles, lay.shares, strict=True):
            self.draw_shares(surf.subsurface(rect), tb)
        self.draw_strip(surf.subsurface(lay.energy), "kinetic energy  (E - E0) / E0",
                        [(tb, tb.energy0, "energy") for tb in self.tumbles], floor=1e-7)
        self.draw_strip(surf.subsurface(lay.momentum), "world angular momentum  (|L| - |L0|) / |L0|",
                        [(tb, tb.momentum0, "momentum") for tb in self.tumbles], floor=1e-15)
        return lay

    def draw_body(self, sub: Any, tb: Tumble, view: Any) -> None:
        pg = self.pg
        sub.fill(P.DEEP_SLATE)
        view.yaw, view.pitch = self.yaw, self.pitch
        cam = view.camera()
        if tb.dim > 3:
            self.draw_shadow(sub, tb, view, cam)
        view.draw(sub, camera=cam)
        if tb.dim == 3:
            what = "3-D: the whole box"
        else:
            fixed = " = ".join(f"x{a}" for a in range(3, tb.dim))
            what = f"{tb.dim}-D: the slice {fixed} = 0 through its centre; lines: the box seen along them"
        sub.blit(self.small.render(what, True, P.CHALK), (6, 4))
        pg.draw.rect(sub, P.FADED_CHALK, sub.get_rect(), 1)

    def draw_shadow(self, sub: Any, tb: Tumble, view: Any, cam: Any) -> None:
        """The whole n-D box projected along the hidden axes onto x_0..x_2: its edges, faint."""
        n = tb.dim
        signs = np.array(np.meshgrid(*[[-1.0, 1.0]] * n, indexing="ij")).reshape(n, -1).T
        corners = (signs * tb.half) @ tb.sim.rotation(tb.handle).T + tb.sim.position(tb.handle)
        px, depth = view.project(sub, corners[:, :3], cam)
        colour = P.mix(P.DEEP_SLATE, P.FADED_CHALK, 0.45)
        for axis in range(n):
            for i in np.flatnonzero(signs[:, axis] < 0).tolist():
                j = i + 2 ** (n - 1 - axis)  # the corner across that axis (meshgrid order)
                if depth[i] > 0 and depth[j] > 0:
                    self.pg.draw.aaline(sub, colour, px[i].tolist(), px[j].tolist())

    def _frame(self, sub: Any, title: str) -> tuple[int, int, int, int]:
        """Background, border and title of a plot; returns its inner (x, y, w, h) in pixels."""
        sub.fill(P.DEEP_SLATE)
        self.pg.draw.rect(sub, P.FADED_CHALK, sub.get_rect(), 1)
        sub.blit(self.small.render(title, True, P.CHALK), (6, 3))
        th = self.small.get_height() + 5
        x, w = 52, sub.get_width() - 52 - 8
        return x, th, max(8, w), max(8, sub.get_height() - th - 14)

    def _time_axis(self, sub: Any, inner: tuple[int, int, int, int], t_end: float) -> tuple[float, float]:
        x, y, w, h = inner
        if self.window is None:
            t0, t1 = 0.0, max(t_end, STEP)
        else:
            t0 = max(0.0, t_end - self.window)
            t1 = t0 + self.window
        label = self.small.render(f"{t0:.0f} s", True, P.FADED_CHALK)
        sub.blit(label, (x, y + h + 1))
        label = self.small.render(f"{t1:.0f} s", True, P.FADED_CHALK)
        sub.blit(label, (x + w - label.get_width(), y + h + 1))
        return t0, t1

    def _lines(self, sub: Any, inner: tuple[int, int, int, int], t: np.ndarray, v: np.ndarray,
               span: tuple[float, float], vrange: tuple[float, float], colour: Any, width: int = 1) -> None:
        x, y, w, h = inner
        keep = t >= span[0]
        if keep.sum() < 2:
            return
        t, v = t[keep], v[keep]
        # at most two points per pixel column: a long history stays cheap to draw
        stride = max(1, len(t) // (2 * w))
        t, v = t[::stride], v[::stride]
        lo, hi = vrange
        px = x + (t - span[0]) / (span[1] - span[0]) * w
        py = y + h - (np.clip(v, lo, hi) - lo) / (hi - lo) * h
        self.pg.draw.lines(sub, colour, False, np.stack([px, py], axis=1).tolist(), width)

    def draw_strip(self, sub: Any, title: str, series: list[tuple[Tumble, float, str]], floor: float) -> None:
        """Relative changes of a conserved quantity for both dimensions, on a symmetric axis."""
        inner = self._frame(sub, title)
        x, y, w, h = inner
        t_end = max((tb.t for tb, _, _ in series), default=0.0)
        span = self._time_axis(sub, inner, t_end)
        devs = []
        for tb, ref, key in series:
            d = tb.data()
            devs.append((tb, d["time"], d[key] / ref - 1.0))
        top = max([floor] + [float(np.abs(dv[t >= span[0]]).max()) for _, t, dv in devs if len(dv)])
        self.pg.draw.line(sub, P.FADED_CHALK, (x, y + h // 2), (x + w, y + h // 2))
        for text, at in ((f"{top:+.1e}", y), (f"{-top:+.1e}", y + h - self.small.get_height())):
            sub.blit(self.small.render(text, True, P.FADED_CHALK), (2, at))
        legend_x = x + w
        for i, (tb, t, dv) in enumerate(devs):
            self._lines(sub, inner, t, dv, span, (-top, top), DIM_COLOURS[i], 2)
            now = f"{tb.dim}-D {dv[-1]:+.1e}" if len(dv) else f"{tb.dim}-D"
            img = self.small.render(now, True, DIM_COLOURS[i])
            legend_x -= img.get_width() + 10
            sub.blit(img, (legend_x, 3))

    def draw_shares(self, sub: Any, tb: Tumble) -> None:
        """The share of |L|^2 in each principal plane of one body, 0 to 1."""
        inner = self._frame(sub, f"{tb.dim}-D: share of |L|^2 per principal plane "
                                 f"(amber: the spin plane {tb.labels[tb.spin_plane]})")
        x, y, w, h = inner
        d = tb.data()
        span = self._time_axis(sub, inner, tb.t)
        for text, at in (("1", y), ("0", y + h - self.small.get_height())):
            sub.blit(self.small.render(text, True, P.FADED_CHALK), (x - 12, at))
        cols = share_colours(tb.moments, tb.spin_plane)
        order = [i for i in range(len(cols)) if i != tb.spin_plane] + [tb.spin_plane]
        for i in order:
            if len(d["time"]):
                self._lines(sub, inner, d["time"], d["shares"][:, i], span, (0.0, 1.0), cols[i],
                            3 if i == tb.spin_plane else 1)
        # name the planes holding much of the momentum now, at the right end of their lines
        if len(d["time"]):
            now = d["shares"][-1]
            for i in np.flatnonzero(now > 0.15).tolist():
                img = self.small.render(tb.labels[i], True, cols[i])
                py = y + h - now[i] * h - img.get_height() // 2
                sub.blit(img, (x + w - img.get_width() - 2, int(np.clip(py, y, y + h - img.get_height()))))


class TeachApp:
    """The teaching scene in a window or off-screen: two tumbles, their plots, a title and keys."""

    def __init__(self, pygame: Any, dims: Any = DEFAULT_DIMS, size: tuple[int, int] = (960, 600),
                 gyroscopic: str = "split", headless: bool = False, text: int | None = None) -> None:
        """``text``: pixel height of the small font (default: from the height of ``size``).
        Headless, the plots show the whole run; in a window, the last PLOT_SECONDS."""
        self.pg, self.size, self.headless = pygame, (int(size[0]), int(size[1])), headless
        self.dims = check_dims(dims)
        if gyroscopic not in MODES:
            raise InputError(f"gyroscopic: expected one of {list(MODES)}, got {gyroscopic!r}")
        self.mode = gyroscopic
        small = max(13, self.size[1] // 42) if text is None else int(text)
        self.font = pygame.font.Font(None, max(14, self.size[1] // 30, int(small * 1.3)))
        self.small = pygame.font.Font(None, small)
        self.paused = False
        self.bank = 0.0
        self.clock_fps = 0.0
        self.reset()

    def reset(self) -> None:
        yaw = (self.view.yaw, self.view.pitch) if getattr(self, "view", None) is not None else None
        self.tumbles = (Tumble(self.dims[0], self.mode), Tumble(self.dims[1], self.mode))
        self.view = TeachView(self.pg, self.tumbles, self.font, self.small,
                              window=None if self.headless else PLOT_SECONDS)
        if yaw is not None:
            self.view.yaw, self.view.pitch = yaw
        self.bank = 0.0

    def step(self) -> None:
        for tb in self.tumbles:
            tb.step()

    def advance(self, seconds: float) -> int:
        """Physics for a frame: one step headless, else the frame's wall time in fixed steps (at
        most two; the rest is dropped, so a slow machine shows slow motion)."""
        if self.paused:
            return 0
        if self.headless:
            self.step()
            return 1
        self.bank += seconds
        steps = min(2, int(self.bank / STEP))
        self.bank = 0.0 if steps == 2 else self.bank - steps * STEP
        for _ in range(steps):
            self.step()
        return steps

    def handle_event(self, ev: Any) -> bool:
        pg = self.pg
        if ev.type == pg.QUIT:
            return False
        if ev.type == pg.MOUSEMOTION and ev.buttons[2]:
            self.view.yaw += ev.rel[0] * 0.01
            self.view.pitch = float(np.clip(self.view.pitch + ev.rel[1] * 0.01, -1.4, 1.4))
        elif ev.type == pg.KEYDOWN:
            if ev.key == pg.K_ESCAPE:
                return False
            if ev.key == pg.K_SPACE:
                self.paused = not self.paused
            elif ev.key == pg.K_r:
                self.reset()
            elif ev.key == pg.K_g:
                self.mode = MODES[(MODES.index(self.mode) + 1) % len(MODES)]
                self.reset()
        return True

    def frame(self, seconds: float, events: list[Any] | None = None) -> bool:
        running = True
        for ev in self.pg.event.get() if events is None else events:
            running = self.handle_event(ev) and running
        keys = self.pg.key.get_pressed()
        turn = int(bool(keys[self.pg.K_RIGHT])) - int(bool(keys[self.pg.K_LEFT]))
        self.view.yaw += 1.5 * seconds * turn
        self.advance(seconds)
        return running

    def draw(self, surf: Any) -> None:
        surf.fill(P.NIGHT_SLATE)
        bar = self.small.get_height() + 8
        status = self.font.get_height() + 8
        self.view.draw(surf, top=bar + 4, bottom=status + 4)
        a, b = self.dims
        head = self.pg.Surface((self.size[0], bar))
        head.fill(P.DEEP_SLATE)
        title = (f"Tumbling box: the same box in {a}-D and {b}-D, spun near its middle principal plane"
                 f"   gyroscopic '{self.mode}'")
        head.blit(self.small.render(title, True, P.FADED_CHALK), (8, 4))
        surf.blit(head, (0, 0))
        fps = "headless" if self.headless else f"{self.clock_fps:5.1f} fps"
        keys = "G: switch mode   R: restart   space: pause   right mouse / arrows: turn   esc: quit"
        text = f"{fps}   t = {self.tumbles[0].t:5.1f} s{'   PAUSED' if self.paused else ''}   {keys}"
        foot = self.pg.Surface((self.size[0], status))
        foot.fill(P.DEEP_SLATE)
        foot.blit(self.font.render(text, True, P.CHALK), (8, 4))
        surf.blit(foot, (0, self.size[1] - status))


def render_teach(dims: Any, seconds: float, out: Any, size: tuple[int, int] = (960, 600),
                 gyroscopic: str = "split") -> dict[str, Any]:
    """Run the teaching scene off-screen for ``seconds`` of simulated time and save its last frame
    (the bodies and the plots) as the PNG ``out``. Returns ``path``, ``app`` and ``data`` (each
    tumble's :meth:`Tumble.data`)."""
    import os
    from pathlib import Path

    from ndrigid.core.errors import positive_scalar

    seconds = positive_scalar("seconds", seconds)
    os.environ.setdefault("SDL_VIDEODRIVER", "dummy")
    os.environ.setdefault("SDL_AUDIODRIVER", "dummy")
    os.environ.setdefault("PYGAME_HIDE_SUPPORT_PROMPT", "1")
    import pygame

    path = Path(out)
    if path.suffix.lower() != ".png":
        raise InputError(f"out: expected a file name ending in .png, got {str(out)!r}")
    pygame.init()
    try:
        app = TeachApp(pygame, dims, size, gyroscopic, headless=True)
        for _ in range(int(round(seconds / STEP))):
            app.advance(STEP)
        surf = pygame.Surface(app.size)
        app.draw(surf)
        path.parent.mkdir(parents=True, exist_ok=True)
        pygame.image.save(surf, str(path))
    finally:
        pygame.quit()
    return {"path": path, "app": app, "data": [tb.data() for tb in app.tumbles]}


__all__ = ["DEFAULT_DIMS", "HALF", "NUDGE", "SPIN", "TeachApp", "TeachView", "Tumble", "check_dims",
           "half_extents", "layout", "render_teach"]
