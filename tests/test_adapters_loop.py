"""The plain game-loop adapter: fixed-step accumulator and pose interpolation.

References: exact rational arithmetic (``fractions.Fraction``) for how many whole steps a run of
frame times pays for (brute force, no floating point); scipy.linalg.expm / logm for the geodesic
between two rotations, M(a) = expm(a logm(M1 M0^T)) M0 (independent of the geometric-algebra
code); the core Simulation stepped directly for the poses the stepper remembers.
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import pytest
from conftest import dims
from ndrigid.adapters.loop import FixedStepper, interpolate_poses
from ndrigid.core.algebra import Algebra, skew
from ndrigid.core.errors import InputError
from ndrigid.core.geometry.shapes import Ball
from ndrigid.core.world.simulation import Simulation
from scipy.linalg import expm, logm

DT = 1.0 / 60.0


def _stepper(dim: int = 2, **kwargs: object) -> FixedStepper:
    sim = Simulation(dim)
    sim.add_body(Ball(dim, 0.5), position=np.r_[0.0, 5.0, np.zeros(dim - 2)])
    return FixedStepper(sim, **kwargs)  # type: ignore[arg-type]


def test_steps_for_irregular_frames_match_exact_arithmetic(rng: np.random.Generator) -> None:
    """Steps per frame = floor(total / dt) increments, with the totals summed exactly as
    rationals (brute force); alpha is the exact leftover fraction, always in [0, 1)."""
    st = _stepper(max_steps_per_frame=1000)
    frames = rng.uniform(0.0, 0.05, 400)
    frames[::17] = 0.0  # zero-length frames happen (paused clocks)
    total, dt = Fraction(0), Fraction(DT)
    taken_exact = 0
    for f in frames:
        total += Fraction(float(f))
        want = math.floor(total / dt) - taken_exact
        taken_exact += want
        assert st.advance(float(f)) == want
        assert 0.0 <= st.alpha < 1.0
        assert math.isclose(st.alpha, float(total / dt - taken_exact), abs_tol=1e-9)
    assert st.steps == st.sim.step_count == taken_exact
    assert math.isclose(st.sim.time, taken_exact * DT, rel_tol=1e-12)


def test_frames_at_the_step_rate_take_one_step_each() -> None:
    """A 60 Hz loop at 60 Hz physics takes exactly one step per frame, although the float sum of
    the frame times lands a few ulps short of whole steps (common practice: no 0/2 alternation)."""
    st = _stepper()
    assert [st.advance(DT) for _ in range(600)] == [1] * 600
    st = _stepper()
    assert [st.advance(DT / 3) for _ in range(300)] == [0, 0, 1] * 100


def test_spiral_of_death_cap_drops_the_backlog() -> None:
    """A 1 s hitch with a 5-step cap takes 5 steps, keeps less than a step banked and counts the
    rest as dropped; the next normal frame takes one step, not a burst (common practice)."""
    st = _stepper(max_steps_per_frame=5)
    assert st.advance(1.0) == 5
    assert 0.0 <= st.alpha < 1.0
    assert math.isclose(st.dropped_seconds + 5 * DT + st.accumulator, 1.0, rel_tol=1e-12)
    assert st.dropped_seconds > 0.8
    assert st.advance(DT) == 1


def test_bad_input_leaves_the_stepper_unchanged() -> None:
    st = _stepper()
    st.advance(0.5 * DT)
    before = (st.accumulator, st.steps)
    for bad in (-0.1, float("nan"), float("inf")):
        with pytest.raises(InputError, match="frame_seconds"):
            st.advance(bad)
    assert (st.accumulator, st.steps) == before
    with pytest.raises(InputError, match="max_steps_per_frame"):
        _stepper(max_steps_per_frame=0)
    with pytest.raises(InputError, match="dt"):
        _stepper(dt=-1.0)
    with pytest.raises(InputError, match="method"):
        st.interpolated("slerp-ish")


@dims()
@pytest.mark.parametrize("method", ["nlerp", "exact"])
def test_rotor_interpolation_follows_the_geodesic(dim: int, method: str, rng: np.random.Generator) -> None:
    """Against scipy: M(a) = expm(a logm(M1 M0^T)) M0. The exact method matches to round-off; nlerp
    matches at both ends and stays within a small angle of it between two nearby poses (one step
    of a fast spin: 0.3 rad)."""
    alg = Algebra(dim)
    k = alg.k
    B0 = rng.uniform(-1.0, 1.0, k)
    dB = rng.normal(size=k)
    dB *= 0.3 / np.linalg.norm(dB)
    R0 = alg.rotor(B0)
    R1 = alg.rotor_mul(alg.rotor(dB), R0)
    M0, M1 = expm(skew(B0)), expm(skew(dB)) @ expm(skew(B0))
    L = np.real(logm(M1 @ M0.T))
    p0, p1 = rng.normal(size=dim), rng.normal(size=dim)
    for a in (0.0, 0.25, 0.5, 0.9):
        pos, R = interpolate_poses(alg, p0, R0, p1, R1, a, method)
        assert np.allclose(pos, p0 + a * (p1 - p0), atol=1e-14)  # linear in position
        got, want = alg.rotor_to_matrix(R), expm(a * L) @ M0
        assert alg.rotor_norm_error(R) < 1e-12  # a unit rotor
        tol = 1e-9 if method == "exact" or a == 0.0 else 0.3 ** 3
        assert np.abs(got - want).max() < tol
    # R1 and -R1 are the same rotation: the blend does not take the long way round
    _, Rm = interpolate_poses(alg, p0, R0, p1, -R1, 0.5, method)
    assert np.allclose(alg.rotor_to_matrix(Rm), expm(0.5 * L) @ M0, atol=1e-3)


@dims(2, 4)
def test_interpolated_poses_lie_between_the_last_two_steps(dim: int) -> None:
    """The previous poses are those of the core one step back (reference: a Simulation stepped
    directly), and the interpolated position is that fraction alpha of the way along."""
    st = _stepper(dim)
    ref = Simulation(dim)
    ref.add_body(Ball(dim, 0.5), position=np.r_[0.0, 5.0, np.zeros(dim - 2)])
    st.advance(3.4 * DT)
    for _ in range(2):
        ref.step()
    prev = ref.positions
    ref.step()
    p0, _ = st.previous_poses()
    assert np.array_equal(p0, prev) and np.array_equal(st.sim.positions, ref.positions)
    pos, _ = st.interpolated()
    assert math.isclose(st.alpha, 0.4, abs_tol=1e-9)
    assert np.allclose(pos, prev + st.alpha * (ref.positions - prev), atol=1e-14)
    # a body added after the last step is drawn where it is
    h = st.sim.add_body(Ball(dim, 0.2), position=np.full(dim, 3.0))
    pos, _ = st.interpolated()
    assert np.array_equal(pos[st.sim.row(h)], np.full(dim, 3.0))
