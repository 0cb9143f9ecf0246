"""One pose convention at the public edge: a position and a rotor everywhere, a rotation matrix only
under the explicit keyword ``rotation`` (``rotations`` for batches), never both; plus the read-only
component arrays and the Transform checks at assignment."""

from __future__ import annotations

import numpy as np
import pytest
from ndrigid.adapters.esper import RigidBody, Transform, Velocity
from ndrigid.core import Algebra, Ball, Box, InputError, Simulation
from ndrigid.core.geometry.slicing import axis_flat, slice_bodies, slice_shape

DIMS = [2, 3, 4, 5]


def _turn(dim: int) -> tuple[np.ndarray, np.ndarray]:
    alg = Algebra(dim)
    R = alg.rotor(np.linspace(0.2, 0.9, alg.k))
    return R, alg.rotor_to_matrix(R)


@pytest.mark.parametrize("dim", DIMS)
def test_a_rotation_matrix_gives_the_same_body_pose_as_its_rotor(dim: int) -> None:
    """add_body, set_pose and bodies_overlapping_shape: rotor R and matrix M(R) are the same pose
    (the rotor's sign is free: compared through the matrix)."""
    R, M = _turn(dim)
    sim = Simulation(dim)
    a = sim.add_body(Box(np.linspace(0.2, 0.5, dim)), rotor=R)
    b = sim.add_body(Box(np.linspace(0.2, 0.5, dim)), rotation=M, position=np.full(dim, 3.0))
    np.testing.assert_allclose(sim.rotation(b), sim.rotation(a), atol=1e-12)
    sim.set_pose(a, rotation=M.T)
    np.testing.assert_allclose(sim.rotation(a), M.T, atol=1e-12)
    probe = Box(np.full(dim, 0.1))
    where = np.full(dim, 3.0)
    assert sim.bodies_overlapping_shape(probe, where, rotation=M).tolist() == [b]
    assert sim.bodies_overlapping_shape(probe, where, R).tolist() == [b]


def test_rotor_and_rotation_together_or_a_bad_matrix_are_refused_and_nothing_changes() -> None:
    R, M = _turn(3)
    sim = Simulation(3)
    h = sim.add_body(Ball(3, 0.5))
    before = sim.positions, sim.rotors
    with pytest.raises(InputError, match="at most one of a rotor and a rotation matrix"):
        sim.add_body(Ball(3, 0.5), rotor=R, rotation=M)
    with pytest.raises(InputError, match="rotation: expected rotation matrices"):
        sim.set_pose(h, [1.0, 2.0, 3.0], rotation=2.0 * np.eye(3))
    with pytest.raises(InputError, match=r"rotation: expected shape \(3, 3\)"):
        sim.add_body(Ball(3, 0.5), rotation=np.eye(4))
    assert sim.count == 1
    np.testing.assert_array_equal(sim.positions, before[0])
    np.testing.assert_array_equal(sim.rotors, before[1])


@pytest.mark.parametrize("dim", [3, 4])
def test_slicing_takes_rotors_and_matrices_only_by_keyword(dim: int) -> None:
    R, M = _turn(dim)
    box = Box(np.linspace(0.3, 0.6, dim))
    flat = axis_flat(dim)
    by_rotor = slice_shape(box, np.zeros(dim), R, flat)[0]
    by_matrix = slice_shape(box, np.zeros(dim), flat=flat, rotation=M)[0]
    np.testing.assert_allclose(np.sort(by_rotor.vertices, axis=0), np.sort(by_matrix.vertices, axis=0),
                               atol=1e-12)
    batch = slice_bodies(box, np.zeros((2, dim)), np.stack([R, R]), flat)[0]
    batch_m = slice_bodies(box, np.zeros((2, dim)), flat=flat, rotations=np.stack([M, M]))[0]
    np.testing.assert_allclose(batch.points[batch.valid], batch_m.points[batch_m.valid], atol=1e-12)
    with pytest.raises(InputError, match="pass matrices as rotations="):
        slice_bodies(box, np.zeros((1, dim)), M[None], flat)
    with pytest.raises(InputError, match="at most one"):
        slice_bodies(box, np.zeros((1, dim)), R[None], flat, rotations=M[None])


def test_transform_checks_its_values_when_made() -> None:
    """A NaN, a rotor of the wrong size or a non-unit rotor is refused at construction (before,
    it surfaced a frame later); a rotation matrix is accepted under ``rotation``."""
    with pytest.raises(InputError, match="position: expected finite values"):
        Transform(position=[0.0, np.nan, 0.0])
    with pytest.raises(InputError, match="rotor: expected 2\\*\\*\\(n-1\\) = 4 components, got 8"):
        Transform(position=[0.0, 1.0, 0.0], rotor=np.eye(8)[0])
    with pytest.raises(InputError, match="unit rotor"):
        Transform(position=[0.0, 1.0, 0.0], rotor=[2.0, 0.0, 0.0, 0.0])
    with pytest.raises(InputError, match="rotor, rotation"):
        Transform(position=[0.0, 1.0, 0.0], rotor=[1.0, 0.0, 0.0, 0.0], rotation=np.eye(3))
    R, M = _turn(3)
    t = Transform(position=[0.0, 1.0, 0.0], rotation=M)
    np.testing.assert_allclose(t.matrix, M, atol=1e-12)
    with pytest.raises(InputError, match="linear: expected finite values"):
        Velocity(linear=[np.inf, 0.0, 0.0])


def test_in_place_edits_of_component_arrays_say_to_assign_instead() -> None:
    """Component fields are read-only views; writing into one raises an InputError that names the
    fix (assign the field), and arithmetic on them still gives ordinary arrays."""
    import esper
    from ndrigid.adapters.esper import PhysicsProcessor

    previous = esper.current_world
    esper.switch_world("pose-convention")
    try:
        physics = PhysicsProcessor(3)
        esper.add_processor(physics)
        e = esper.create_entity(RigidBody(Ball(3, 0.5)), Transform(position=[0.0, 2.0, 0.0]), Velocity())
        esper.process(1 / 60)
        t = esper.component_for_entity(e, Transform)
        with pytest.raises(InputError, match=r"read-only.*transform.position = p"):
            t.position[0] = 5.0
        with pytest.raises(InputError, match="read-only"):
            t.position += 1.0
        with pytest.raises(InputError, match="read-only"):
            esper.component_for_entity(e, Velocity).linear[1] = 0.0
        moved = t.position + 1.0
        assert type(moved) is np.ndarray
        moved[0] = 3.0  # an ordinary writable array
        t.position = moved  # the documented way: teleports before the next step
        esper.process(1 / 60)
        assert abs(esper.component_for_entity(e, Transform).position[0] - 3.0) < 1e-9
    finally:
        esper.switch_world(previous)
        esper.delete_world("pose-convention")
