"""The "split" gyroscopic mode: the free rigid body by Lie-Poisson splitting (McLachlan 1993;
Dullweber, Leimkuhler and McLachlan 1997), checked in 3-D to 5-D against what the free body
conserves, the elliptic-integral period of the intermediate-axis flip (Landau and Lifshitz,
Mechanics, section 37), and scipy's solve_ivp (DOP853) of the matrix Euler equations."""

from __future__ import annotations

import numpy as np
import pytest
from ndrigid.core import Box, Settings, Simulation
from ndrigid.core.algebra import second_compound, skew
from scipy.special import ellipk
from test_integrate import _euler_ref_nd


def _free(dim: int, hz: float = 60.0, mode: str = "split") -> Simulation:
    return Simulation(dim, gravity=np.zeros(dim), settings=Settings(dt=1.0 / hz, gyroscopic=mode,
                                                                    sleep_enabled=False))


def _body_omega(sim: Simulation, h: int) -> np.ndarray:
    return second_compound(sim.rotation(h)).T @ sim.angular_velocity(h)


@pytest.mark.parametrize("dim", [3, 4, 5])
def test_free_body_keeps_its_momentum_and_a_bounded_energy(dim: int) -> None:
    """10,000 steps at 60 Hz of a box with distinct extents spun in a generic way: the world angular
    momentum bivector is constant to 1e-10 relative (each sub-flow turns body and momentum
    together); the energy error stays within 1e-3 relative and shows no trend (the means of the
    first and last thousand steps agree to 1e-4): a symplectic method's bounded error."""
    rng = np.random.default_rng(7 + dim)
    sim = _free(dim)
    h = sim.add_body(Box(np.linspace(0.15, 0.5, dim)), mass=1.0, angular_velocity=rng.normal(size=sim.alg.k))
    L0 = sim.angular_momentum(h)
    E0 = sim.kinetic_energy(h)
    err = np.empty(10_000)
    worst = 0.0
    for i in range(10_000):
        sim.step()
        worst = max(worst, float(np.abs(sim.angular_momentum(h) - L0).max()))
        err[i] = sim.kinetic_energy(h) / E0 - 1.0
    assert worst <= 1e-10 * np.abs(L0).max()
    assert np.abs(err).max() < 1e-3
    assert abs(err[-1000:].mean() - err[:1000].mean()) < 1e-4


def test_intermediate_axis_flip_period_matches_the_elliptic_integral() -> None:
    """A 3-D box spun near its middle axis flips with the period
    T = 4 K(k) sqrt(I1 I2 I3 / ((I3 - I2)(L^2 - 2 E I1))), k^2 = (I2 - I1)(2 E I3 - L^2) /
    ((I3 - I2)(L^2 - 2 E I1)) for L^2 > 2 E I2 (Landau and Lifshitz, section 37; scipy ellipk takes
    m = k^2). Measured from the sign changes of the middle-axis rate (two per period): within 1 %."""
    sim = _free(3)
    half = np.array([0.1, 0.25, 0.45])
    B0 = np.array([0.05, 3.0, 0.3])  # planes (0,1), (0,2), (1,2); the (0,2) plane is the middle one
    h = sim.add_body(Box(half), mass=1.0, angular_velocity=B0)
    I = sim.inertia(h, "principal")
    order = np.argsort(I)
    mid = int(order[1])
    w = _body_omega(sim, h)
    E = 0.5 * float(np.sum(I * w * w))
    L2 = float(np.sum((I * w) ** 2))
    I1, I2, I3 = I[order]
    if L2 < 2 * E * I2:  # the other branch: I1 and I3 trade places
        I1, I3 = I3, I1
    m = (I2 - I1) * (2 * E * I3 - L2) / ((I3 - I2) * (L2 - 2 * E * I1))
    T = 4.0 * ellipk(m) * np.sqrt(I1 * I2 * I3 / ((I3 - I2) * (L2 - 2 * E * I1)))
    dt = sim.settings.dt
    crossings = []
    prev = _body_omega(sim, h)[mid]
    for i in range(int(8 * T / dt)):
        sim.step()
        cur = _body_omega(sim, h)[mid]
        if np.sign(cur) != np.sign(prev):
            crossings.append((i + prev / (prev - cur)) * dt)  # linear interpolation of the zero
        prev = cur
    assert len(crossings) >= 6
    measured = 2.0 * float(np.mean(np.diff(crossings)))
    assert measured == pytest.approx(T, rel=0.01)


@pytest.mark.parametrize("dim", [4, 5])
def test_body_momentum_agrees_with_solve_ivp_to_second_order(dim: int) -> None:
    """Body-frame momentum after 1 s against solve_ivp: error below 1e-3 relative at 240 Hz, and
    halving the step divides it by about four (second order; measured ratio 3.5-4.5)."""
    rng = np.random.default_rng(30 + dim)
    half = np.linspace(0.15, 0.5, dim)
    c = (2 * half) ** 2 / 12.0  # box covariance per unit mass, principal = box axes
    B0 = rng.normal(size=dim * (dim - 1) // 2)
    S = c[:, None] + c[None, :]
    ref = S * _euler_ref_nd(c, skew(B0), 1.0)  # body momentum L = S * W (test_integrate.py)
    errs = []
    for hz in (240.0, 480.0):
        sim = _free(dim, hz)
        h = sim.add_body(Box(half), mass=1.0, angular_velocity=B0)
        for _ in range(int(hz)):
            sim.step()
        got = S * skew(_body_omega(sim, h))
        errs.append(float(np.abs(got - ref).max() / np.abs(ref).max()))
    assert errs[0] < 1e-3, errs
    assert 3.5 < errs[0] / errs[1] < 4.5, errs


def test_explicit_mode_names_the_body_when_it_blows_up() -> None:
    """A long thin 4-D box spun fast in explicit mode gains energy until its angular velocity
    overflows (measured before: NaN at step 3,095, then an error about an argument the user never
    passed); now the step raises naming the body and the mode, and leaves the state as it was."""
    sim = Simulation(4, gravity=np.zeros(4), settings=Settings(gyroscopic="explicit", sleep_enabled=False))
    h = sim.add_body(Box([0.05, 0.6, 0.1, 0.3]), mass=1.0,
                     angular_velocity=[40.0, 3.0, -20.0, 7.0, 30.0, 1.0])
    with pytest.raises(FloatingPointError, match=rf"explicit.*body {h}"):
        for _ in range(100_000):
            before = sim.angular_velocity(h)
            sim.step()
    np.testing.assert_array_equal(sim.angular_velocity(h), before)
