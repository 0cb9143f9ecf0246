"""Scene queries against brute force.

References:
* rays: a brute-force ray march (steps of 2 mm along the ray, testing containment) gives the entry
  distance to within one step;
* containment tests independent of the project's face data: |x - c| <= r for balls, the facet
  equations of scipy.spatial.ConvexHull of the world vertices for boxes and polytopes (box corners
  enumerated with itertools.product), u . x <= d for half-spaces;
* overlap of a ball with a box: distance from the centre to the box by scipy.optimize.minimize
  (L-BFGS-B over the box coordinates) compared with the radius;
* bounding boxes from each shape's support function (convex-geometry definition).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from conftest import dims
from ndrigid.core.errors import InputError, InputTypeError
from ndrigid.core.geometry.polytopes import orthoplex, regular_simplex
from ndrigid.core.geometry.shapes import Ball, Box, Compound, HalfSpace
from ndrigid.core.world.simulation import Simulation
from scipy.optimize import minimize
from scipy.spatial import ConvexHull

STEP = 2e-3


def _up(n: int) -> np.ndarray:
    u = np.zeros(n)
    u[1] = 1.0
    return u


class _Solid:
    """An independent containment test of one body in world coordinates."""

    def __init__(self, sim: Simulation, handle: int) -> None:
        shape = sim.shape(handle)
        p, M = sim.position(handle), sim.rotation(handle)
        self.kind = type(shape).__name__
        if isinstance(shape, Ball):
            self.c, self.r = p, shape.radius
        elif isinstance(shape, HalfSpace):
            self.u = M @ shape.normal
            self.d = shape.offset + self.u @ p
        else:
            if isinstance(shape, Box):
                local = np.array(list(itertools.product(*[(-h, h) for h in shape.half_extents])))
            else:
                local = np.asarray(shape.vertices)
            self.eq = ConvexHull(p + local @ M.T).equations

    def contains(self, x: np.ndarray, tol: float = 0.0) -> np.ndarray:
        """x (S, n) -> (S,) bool."""
        if self.kind == "Ball":
            return np.linalg.norm(x - self.c, axis=1) <= self.r + tol
        if self.kind == "HalfSpace":
            return x @ self.u <= self.d + tol
        return np.all(x @ self.eq[:, :-1].T + self.eq[:, -1] <= tol, axis=1)


def _scene(dim: int, rng: np.random.Generator) -> Simulation:
    sim = Simulation(dim)
    alg = sim.alg
    sim.add_body(HalfSpace(_up(dim) + 0.2 * rng.normal(size=dim), -1.5), kind="static")
    shapes = [Ball(dim, 0.6), Box(rng.uniform(0.3, 0.7, dim)), orthoplex(dim, circumradius=0.8),
              Box(rng.uniform(0.2, 0.5, dim)), regular_simplex(dim, edge=1.2), Ball(dim, 0.3)]
    for i, s in enumerate(shapes):
        pos = rng.uniform(-2.5, 2.5, dim)
        pos[0] = -3.0 + 1.8 * i  # spread along e_0 so rays from +e_0 pass several bodies
        sim.add_body(s, position=pos, rotor=alg.rotor(rng.normal(size=alg.k)), kind="static")
    return sim


def _march(solid: _Solid, o: np.ndarray, d: np.ndarray, length: float) -> float | None:
    t = np.arange(0.0, length, STEP)
    inside = solid.contains(o + t[:, None] * d)
    return float(t[np.argmax(inside)]) if inside.any() else None


@dims()
def test_raycast_all_matches_ray_march(dim: int, rng: np.random.Generator) -> None:
    sim = _scene(dim, rng)
    solids = {int(h): _Solid(sim, int(h)) for h in sim.handles}
    compared = 0
    for target in sim.handles[1:]:
        o = rng.uniform(-1, 1, dim) * 4.0
        o[0] = 9.0
        aim = sim.position(int(target)) + 0.2 * rng.normal(size=dim)
        d = (aim - o) / np.linalg.norm(aim - o)
        length = 20.0
        hits = {h.handle: h for h in sim.raycast_all(o, d, max_distance=length)}
        for h, solid in solids.items():
            tm = _march(solid, o, d, length)
            if tm is not None:
                assert h in hits, (h, tm)
                assert abs(hits[h].distance - tm) <= STEP + 1e-9
                compared += 1
            elif h in hits:  # a grazing chord shorter than the march step: check it finely
                t0 = hits[h].distance
                t = np.linspace(t0, t0 + STEP, 200)
                assert solid.contains(o + t[:, None] * d, tol=1e-9).any()
        for hit in hits.values():
            np.testing.assert_allclose(hit.point, o + hit.distance * d, atol=1e-12)
            assert np.linalg.norm(hit.normal) == pytest.approx(1.0)
            assert hit.normal @ d <= 1e-12  # an entry point: the ray runs against the outward normal
            if hit.distance == 0.0:  # the ray starts inside (e.g. below the tilted floor)
                assert solids[hit.handle].contains(o[None])[0]
                np.testing.assert_allclose(hit.normal, -d)
            elif solids[hit.handle].kind in ("Ball", "Box", "HalfSpace"):
                # the surface normal: just outside along it, just inside against it
                assert not solids[hit.handle].contains((hit.point + 1e-6 * hit.normal)[None])[0]
                assert solids[hit.handle].contains((hit.point - 1e-6 * hit.normal)[None])[0]
        dist = [h.distance for h in sim.raycast_all(o, d, max_distance=length)]
        assert dist == sorted(dist)
        first = sim.raycast(o, d, max_distance=length)
        if dist:
            assert first is not None and first.distance == pytest.approx(min(dist))
        else:
            assert first is None
    assert compared >= len(solids)


@dims()
def test_ray_from_inside_hits_at_zero(dim: int) -> None:
    sim = Simulation(dim)
    h = sim.add_body(Box(np.full(dim, 0.5)), kind="static")
    d = np.ones(dim) / np.sqrt(dim)
    hit = sim.raycast(np.zeros(dim), d)
    assert hit is not None and hit.handle == h and hit.distance == 0.0
    np.testing.assert_allclose(hit.normal, -d)


def test_ray_respects_max_distance_and_layer_mask() -> None:
    sim = Simulation(3)
    near = sim.add_body(Ball(3, 0.5), position=[3, 0, 0], kind="static", layer=2)
    far = sim.add_body(Ball(3, 0.5), position=[6, 0, 0], kind="static", layer=1)
    o, d = [0, 0, 0], [1, 0, 0]
    hit = sim.raycast(o, d)
    assert hit is not None and hit.handle == near and hit.distance == pytest.approx(2.5)
    hit = sim.raycast(o, d, layer_mask=1)
    assert hit is not None and hit.handle == far and hit.distance == pytest.approx(5.5)
    assert sim.raycast(o, d, max_distance=2.4) is None
    assert [h.handle for h in sim.raycast_all(o, d, max_distance=5.6)] == [near, far]


def test_ray_enters_compound_at_its_nearest_piece() -> None:
    sim = Simulation(2)
    comp = Compound([(Ball(2, 0.5), [2.0, 0.0]), (Box([0.5, 0.5]), [-2.0, 0.0])])
    h = sim.add_body(comp, kind="static")
    hits = sim.raycast_all([5.0, 0.0], [-1.0, 0.0])
    assert [x.handle for x in hits] == [h]
    assert hits[0].distance == pytest.approx(2.5)  # the ball piece's surface at x = 2.5


@pytest.mark.parametrize(
    ("origin", "direction", "max_distance", "mask", "error"),
    [
        ([0, 0, 0], [0, 0, 0], 1.0, 1, InputError),
        ([0, 0, 0], [np.nan, 1, 0], 1.0, 1, InputError),
        ([0, 0, 0], [np.inf, 1, 0], 1.0, 1, InputError),
        ([0, np.inf, 0], [1, 0, 0], 1.0, 1, InputError),
        ([0, 0], [1, 0, 0], 1.0, 1, InputError),
        ([0, 0, 0], [1, 0, 0], 0.0, 1, InputError),
        ([0, 0, 0], [1, 0, 0], np.nan, 1, InputError),
        ([0, 0, 0], [1, 0, 0], "far", 1, InputTypeError),
        ([0, 0, 0], [1, 0, 0], 1.0, -1, InputError),
        ([0, 0, 0], [1, 0, 0], 1.0, 2**32, InputError),
        ([0, 0, 0], [1, 0, 0], 1.0, True, InputError),
        ([0, 0, 0], [1, 0, 0], 1.0, 1.5, InputError),
    ],
    ids=["zero-direction", "nan-direction", "inf-direction", "inf-origin", "wrong-dim", "zero-distance",
         "nan-distance", "text-distance", "negative-mask", "wide-mask", "bool-mask", "float-mask"],
)
def test_bad_rays_raise(origin: list, direction: list, max_distance: object, mask: object,
                        error: type[Exception]) -> None:
    sim = Simulation(3)
    sim.add_body(Ball(3, 0.5), kind="static")
    with pytest.raises(error) as info:
        sim.raycast(origin, direction, max_distance=max_distance, layer_mask=mask)
    names = ("origin", "direction", "max_distance", "layer_mask")
    assert any(name in str(info.value) for name in names)


@dims()
def test_bodies_containing_point_matches_independent_containment(dim: int, rng: np.random.Generator) -> None:
    sim = _scene(dim, rng)
    solids = {int(h): _Solid(sim, int(h)) for h in sim.handles}
    pts = np.concatenate([rng.uniform(-4, 7, size=(150, dim)),
                          sim.positions[1:] + 0.3 * rng.normal(size=(len(solids) - 1, dim))])
    inside_any = 0
    for x in pts:
        want = sorted(h for h, s in solids.items() if s.contains(x[None])[0])
        got = sim.bodies_containing_point(x).tolist()
        assert got == want
        inside_any += bool(want)
    assert inside_any > 10


@dims()
def test_bodies_overlapping_box_uses_bounding_boxes(dim: int, rng: np.random.Generator) -> None:
    sim = _scene(dim, rng)
    eye = np.eye(dim)
    lo_b, hi_b = {}, {}
    for h in sim.handles[1:]:
        s, p, M = sim.shape(int(h)), sim.position(int(h)), sim.rotation(int(h))
        dirs = eye @ M
        hi_b[int(h)] = p + np.einsum("ij,ij->i", s.support(dirs), dirs)
        lo_b[int(h)] = p - np.einsum("ij,ij->i", s.support(-dirs), -dirs)
    floor = _Solid(sim, int(sim.handles[0]))
    corners = np.array(list(itertools.product([0, 1], repeat=dim)))
    for _ in range(30):
        c = rng.uniform(-4, 7, dim)
        e = rng.uniform(0.1, 1.5, dim)
        lo, hi = c - e, c + e
        want = [h for h in lo_b if np.all(lo_b[h] <= hi) and np.all(lo <= hi_b[h])]
        if floor.contains(lo + corners * (hi - lo)).any():
            want.append(int(sim.handles[0]))
        assert sim.bodies_overlapping_box(lo, hi).tolist() == sorted(want)


def _box_distance(x: np.ndarray, p: np.ndarray, M: np.ndarray, h: np.ndarray) -> float:
    res = minimize(lambda y: float(np.sum((p + M @ y - x) ** 2)), np.zeros(len(h)), method="L-BFGS-B",
                   bounds=list(zip(-h, h, strict=True)), options={"ftol": 1e-15, "gtol": 1e-12})
    return float(np.sqrt(res.fun))


@dims()
def test_ball_overlap_query_matches_distances(dim: int, rng: np.random.Generator) -> None:
    """Balls overlap when |c1 - c2| <= r1 + r2; a box when the scipy distance is <= r; the plane when
    the centre is within r of the solid."""
    sim = Simulation(dim)
    alg = sim.alg
    floor = sim.add_body(HalfSpace(_up(dim), -2.0), kind="static")
    balls, boxes = {}, {}
    for _ in range(6):
        c = rng.uniform(-2, 2, dim)
        balls[sim.add_body(Ball(dim, 0.4), position=c, kind="static")] = c
    for _ in range(6):
        p = rng.uniform(-2, 2, dim)
        R = alg.rotor(rng.normal(size=alg.k))
        h = rng.uniform(0.2, 0.5, dim)
        boxes[sim.add_body(Box(h), position=p, rotor=R, kind="static")] = (p, alg.rotor_to_matrix(R), h)
    hits = 0
    for _ in range(6):
        x = rng.uniform(-2, 2, dim)
        r = 0.8
        want = [h for h, c in balls.items() if np.linalg.norm(c - x) <= 0.4 + r]
        want += [h for h, (p, M, hh) in boxes.items() if _box_distance(x, p, M, hh) <= r]
        if x[1] - r <= -2.0:
            want.append(floor)
        got = sim.bodies_overlapping_shape(Ball(dim, r), x).tolist()
        assert got == sorted(want)
        hits += len(want)
    assert hits > 0


@dims()
def test_box_overlap_query_against_plane_and_balls(dim: int, rng: np.random.Generator) -> None:
    """A rotated box query reaches the plane iff its lowest corner does (brute force over corners)."""
    sim = Simulation(dim)
    alg = sim.alg
    floor = sim.add_body(HalfSpace(_up(dim), 0.0), kind="static")
    h = np.full(dim, 0.5)
    corners = np.array(list(itertools.product(*[(-x, x) for x in h])))
    for height in (0.3, 0.6, 0.9, 1.2):
        R = alg.rotor(rng.normal(size=alg.k))
        M = alg.rotor_to_matrix(R)
        pos = height * _up(dim)
        want = [floor] if np.min((pos + corners @ M.T)[:, 1]) <= 0.0 else []
        assert sim.bodies_overlapping_shape(Box(h), pos, R).tolist() == want


def test_query_shapes_are_not_kept() -> None:
    sim = Simulation(3)
    sim.add_body(Ball(3, 0.5), kind="static")
    for _ in range(3):
        sim.bodies_overlapping_shape(Ball(3, 0.2), [0.0, 0.0, 0.0])
    assert len(sim.caches.get("narrowphase", {}).get("extras", [])) == 0


def test_bad_query_input_raises() -> None:
    sim = Simulation(3)
    with pytest.raises(InputError, match="point"):
        sim.bodies_containing_point([0.0, 0.0])
    with pytest.raises(InputError, match="lo, hi"):
        sim.bodies_overlapping_box([1, 1, 1], [0, 0, 0])
    with pytest.raises(InputError, match="shape"):
        sim.bodies_overlapping_shape(Ball(2, 1.0), [0, 0, 0])
    with pytest.raises(InputError, match="layer_mask"):
        sim.bodies_containing_point([0, 0, 0], layer_mask=-3)
