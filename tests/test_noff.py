"""Tests of ``core/geometry/noff.py``: reading and writing nOFF.

References (named again beside each check):

* trimesh's OFF reader and writer (trimesh.exchange.off) for the 3-D case, where nOFF is the
  classic Geomview OFF layout: files we write must load in trimesh with the same geometry, and
  files trimesh writes must load here.
* Bit-exact round trips (vertices compared with array_equal, cells index by index).
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pytest
import trimesh
from conftest import dims
from ndrigid.core.errors import InputError
from ndrigid.core.geometry.noff import format_noff, parse_noff, read_noff, write_noff
from ndrigid.core.geometry.polytopes import cell_24, cell_120
from ndrigid.core.geometry.shapes import Box, ConvexPolytope, SimplexMesh


@dims(2, 3, 4, 5)
def test_mesh_round_trip(dim: int, rng: np.random.Generator, tmp_path: Path) -> None:
    """A mesh written and read back has bit-identical vertices and the same cells in order."""
    mesh = ConvexPolytope(rng.normal(size=(4 * dim, dim)) * 1e3 / 7).boundary_mesh()
    path = tmp_path / f"m{dim}.off"
    write_noff(path, mesh)
    back = read_noff(path)
    assert isinstance(back, SimplexMesh)
    np.testing.assert_array_equal(back.vertices, mesh.vertices)
    np.testing.assert_array_equal(back.cells, mesh.cells)


@pytest.mark.parametrize("name", ["box-4d", "24-cell", "120-cell", "box-2d"])
def test_polytope_round_trip(name: str) -> None:
    """A polytope written and read back has the same vertices (bit for bit) and facets."""
    poly = {
        "box-4d": lambda: Box([1.0, 0.5, 0.25, 2.0]),
        "24-cell": cell_24,
        "120-cell": cell_120,
        "box-2d": lambda: Box([0.1, 0.3]),
    }[name]()
    text = format_noff(poly)
    data = parse_noff(text)
    np.testing.assert_array_equal(data.vertices, poly.vertices)
    assert [c.tolist() for c in data.cells] == [f.tolist() for f in poly.facet_vertices]
    assert data.edge_count == len(poly.edges)
    back = read_noff(io.StringIO(text), kind="polytope")
    assert isinstance(back, ConvexPolytope)
    np.testing.assert_array_equal(back.vertices, poly.vertices)
    assert {tuple(sorted(f.tolist())) for f in back.facet_vertices} == {
        tuple(sorted(f.tolist())) for f in poly.facet_vertices
    }


def test_auto_kind() -> None:
    """Simplicial cells give a SimplexMesh, other cells a ConvexPolytope; kind forces a choice."""
    cube_text = format_noff(Box([1.0, 1.0, 1.0, 1.0]))  # cubic cells: 8 vertices each
    assert isinstance(read_noff(io.StringIO(cube_text)), ConvexPolytope)
    with pytest.raises(InputError, match="cells of n = 4 vertices"):
        read_noff(io.StringIO(cube_text), kind="mesh")
    mesh_text = format_noff(Box([1.0, 1.0, 1.0, 1.0]).boundary_mesh())
    assert isinstance(read_noff(io.StringIO(mesh_text)), SimplexMesh)
    assert isinstance(read_noff(io.StringIO(mesh_text), kind="polytope"), ConvexPolytope)


def test_trimesh_reads_our_off(tmp_path: Path) -> None:
    """3-D: trimesh loads the file we write with the same volume and vertices (interoperability)."""
    src = trimesh.creation.icosphere(subdivisions=2, radius=1.7)
    mesh = SimplexMesh(src.vertices, src.faces)
    path = tmp_path / "sphere.off"
    write_noff(path, mesh)
    loaded = trimesh.load(path, process=False)
    assert isinstance(loaded, trimesh.Trimesh)
    np.testing.assert_array_equal(loaded.vertices, mesh.vertices)
    assert loaded.volume == pytest.approx(mesh.mass_properties().volume, rel=1e-12)
    # a polytope's facets (here a box's squares, counter-clockwise seen from outside) load as well
    write_noff(path, ConvexPolytope(np.asarray(Box([1.0, 2.0, 3.0]).vertices)))
    loaded = trimesh.load(path, process=False)
    assert isinstance(loaded, trimesh.Trimesh)
    assert loaded.volume == pytest.approx(48.0, rel=1e-12)


def test_we_read_trimesh_off() -> None:
    """3-D: an OFF file written by trimesh reads back here with trimesh's volume."""
    src = trimesh.creation.torus(major_radius=1.0, minor_radius=0.3)
    text = trimesh.exchange.off.export_off(src)
    mesh = read_noff(io.StringIO(text))
    assert isinstance(mesh, SimplexMesh)
    assert mesh.mass_properties().volume == pytest.approx(src.volume, rel=1e-9)


GOOD = (
    "nOFF\n4\n5 5 0\n"
    + "\n".join(" ".join(str(x) for x in row) for row in np.concatenate([np.eye(4), -np.ones((1, 4))]))
    + "\n"
)


def test_comments_blank_lines_and_inline_dimension() -> None:
    """Comments and blank lines are skipped; 'nOFF 4' on one line is accepted; colours after the
    cell indices are ignored."""
    text = "# a 2-D square\n\nnOFF 2\n4 1 4  # counts\n0 0\n1 0\n1 1\n0 1\n4 0 1 2 3 255 0 0\n"
    data = parse_noff(text)
    assert data.dim == 2 and data.cells[0].tolist() == [0, 1, 2, 3]


MALFORMED = {
    "no-header": ("4 1 0\n", 1, "header"),
    "colour-header": ("COFF\n3 1 0\n", 1, "not supported"),
    "bad-dimension": ("nOFF\nfour\n", 2, "dimension"),
    "dimension-1": ("nOFF\n1\n", 2, "dimension"),
    "bad-counts": ("nOFF\n4\n5 x 0\n", 3, "counts"),
    "missing-counts": ("OFF\n", None, "counts"),
    "short-vertex": ("nOFF\n4\n2 0 0\n1 2 3 4\n1 2 3\n", 5, "4 coordinates for vertex 1"),
    "non-number": ("OFF\n1 0 0\n1 2 z\n", 3, "numbers for vertex 0"),
    "inf-vertex": ("OFF\n1 0 0\n1 2 inf\n", 3, "finite"),
    "missing-vertex": ("OFF\n3 0 0\n1 2 3\n", None, "vertex 1 of 3"),
    "cell-index-range": ("nOFF\n2\n3 1 0\n0 0\n1 0\n0 1\n2 0 3\n", 7, "0..2"),
    "cell-too-short": ("nOFF\n2\n3 1 0\n0 0\n1 0\n0 1\n3 0 1\n", 7, "vertex count m >= 1 followed by m"),
    "trailing": (GOOD + "3 0 1 2\n" * 5 + "1 2 3\n", 14, "end of the file"),
}


@pytest.mark.parametrize("case", list(MALFORMED), ids=list(MALFORMED))
def test_malformed_files_name_the_line(case: str) -> None:
    """A malformed file is rejected with the line number and what was expected there."""
    text, line, fragment = MALFORMED[case]
    with pytest.raises(InputError) as err:
        parse_noff(text)
    msg = str(err.value)
    assert (f"line {line}:" if line is not None else "end of file") in msg
    assert fragment in msg


def test_invalid_mesh_in_file_is_rejected() -> None:
    """A syntactically fine file whose cells do not close is rejected by SimplexMesh's checks."""
    text = "nOFF\n2\n3 2 0\n0 0\n1 0\n0 1\n2 0 1\n2 1 2\n"
    with pytest.raises(InputError, match="not closed"):
        read_noff(io.StringIO(text))
