"""Dynamics layer: integration of velocities and poses, the contact solver, islands and sleep.

``integrate.accelerate``, ``solver.solve_impulses``, ``integrate.advance_poses`` and
``sleep.settle_islands`` are the dynamics stages of a step. Depends on the state layer.
"""
