"""Tests of ``core/geometry/noff.py``: reading and writing nOFF.

References (named again beside each check):

* trimesh's OFF reader and writer (trimesh.exchange.off) for the 3-D case, where nOFF is the
  classic Geomview OFF layout: files we write must load in trimesh with the same geometry, and
  files trimesh writes must load here.
* Bit-exact round trips (vertices compared with array_equal, cells index by index).
* The upper bound theorem (P. McMullen, Mathematika 17, 1970): points on the moment curve span the
  cyclic polytope, N (N - 3) / 2 facets for N points in 4-D; the timing generators at the end use it
  as the worst case for the hull caps.
"""

from __future__ import annotations

import bz2
import gzip
import io
import lzma
import re
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import trimesh
from conftest import dims
from ndrigid.core.errors import InputError, InputTypeError
from ndrigid.core.geometry import noff
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


# ---------------------------------------------------------------------------------------------
# Untrusted files: every failure is an InputError naming the source (the path) and the line
# ---------------------------------------------------------------------------------------------

SIMPLEX_TEXT = "nOFF\n4\n5 0 0\n" + GOOD.split("\n", 3)[3]  # the 5 vertices of GOOD, no cells
TRI = "nOFF\n2\n3 1 0\n0 0\n1 0\n0 1\n3 0 1 2\n"  # a 2-D triangle with one (polygon) cell
BIG_BODY = "0.125 -0.5 1e-3 42\n" * 4000  # 76 000 characters of 4-D vertex lines (over _SCAN_LIMIT)
_GARBAGE = bytes(np.random.default_rng(7).integers(0, 256, size=512, dtype=np.uint8))

# id: (file content, kind, line the message names (None: the end of the file; SHAPE: a check of the
# built shape, after a clean parse, with no line), message fragments)
SHAPE = 0
HOSTILE: dict[str, tuple[str | bytes, str, int | None, tuple[str, ...]]] = {
    "empty-file": ("", "auto", None, ("header 'nOFF' or 'OFF'", "after line 0")),
    "comments-only": ("# nothing\n\n   \n# here\n", "auto", None, ("header", "after line 4")),
    "header-only": ("nOFF\n4\n", "auto", None, ("counts line 'V C E'",)),
    "header-extra": ("nOFF 4 5\n5 0 0\n", "auto", 1, ("nothing more on the header line", "'5'")),
    "huge-dimension": ("nOFF\n" + "1" * 31 + "\n0 0 0\n", "auto", 2, ("MAX_DIMENSION", "2..13")),
    "dimension-digits": ("nOFF\n" + "9" * 5000 + "\n", "auto", 2, ("dimension", "5000 characters")),
    "negative-counts": ("nOFF\n4\n-5 1 0\n", "auto", 3, ("non-negative counts", "'-5 1 0'")),
    "float-counts": ("nOFF\n4\n5.0 1 0\n", "auto", 3, ("integer counts", "'5.0'")),
    "underscore-count": ("nOFF\n4\n1_0 1 0\n", "auto", 3, ("integer counts", "'1_0'")),
    "four-counts": ("nOFF\n4\n5 1 0 7\n", "auto", 3, ("counts line 'V C E'",)),
    "huge-count-short-file": (
        "nOFF\n4\n1000000000 0 0\n1 2 3 4\n", "auto", None, ("vertex 1 of 1000000000", "after line 4")
    ),
    "huge-count-long-file": (
        "nOFF\n4\n1000000000 0 0\n" + BIG_BODY,
        "auto",
        3,
        ("declares 1000000000 vertices", "need at least 7999999999 characters", "file of 76022 characters"),
    ),
    "huge-cell-count": (  # the sixth line, cut short, is read as the first cell
        "nOFF\n4\n5 999999999 0\n" + BIG_BODY[:100], "auto", 9, ("the vertex count of cell 0", "'0.125'")
    ),
    "truncated-vertex": (
        "nOFF\n4\n2 0 0\n1 2 3 4\n1 2", "auto", 5, ("4 coordinates for vertex 1", "2 values")
    ),
    "truncated-cells": (
        "nOFF\n2\n3 3 0\n0 0\n1 0\n0 1\n2 0 1\n2 1 2\n", "auto", None, ("cell 2 of 3", "after line 8")
    ),
    "too-many-coordinates": (
        "nOFF\n4\n1 0 0\n1 2 3 4 5\n", "auto", 4, ("4 coordinates for vertex 0", "5 values")
    ),
    "nan-coordinate": ("OFF\n1 0 0\n0 nan 1\n", "auto", 3, ("finite coordinates for vertex 0",)),
    "overflow-coordinate": (
        "OFF\n2 0 0\n0 0 1\n1e999 0 1\n", "auto", 4, ("finite coordinates for vertex 1",)
    ),
    "hex-coordinate": ("OFF\n1 0 0\n0x10 0 1\n", "auto", 3, ("3 numbers for vertex 0",)),
    "underscore-coordinate": ("OFF\n1 0 0\n1_000 0 1\n", "auto", 3, ("3 numbers for vertex 0",)),
    "arabic-indic-digit": ("OFF\n1 0 0\n\u0661 0 1\n".encode(), "auto", 3, ("3 numbers for vertex 0",)),
    "cell-index-high": ("nOFF\n2\n3 1 0\n0 0\n1 0\n0 1\n3 0 1 3\n", "auto", 7, ("in 0..2", "got 3")),
    "cell-index-negative": ("nOFF\n2\n3 1 0\n0 0\n1 0\n0 1\n3 0 -1 2\n", "auto", 7, ("in 0..2", "got -1")),
    "cell-index-float": (
        "nOFF\n2\n3 1 0\n0 0\n1 0\n0 1\n3 0 1.5 2\n", "auto", 7, ("integer vertex indices",)
    ),
    "cell-without-vertices": (
        "nOFF\n2\n0 1 0\n2 0 1\n", "auto", 4, ("0..-1 (the file declares no vertices)",)
    ),
    "cell-size-zero": ("nOFF\n2\n3 1 0\n0 0\n1 0\n0 1\n0\n", "auto", 7, ("vertex count m >= 1",)),
    "cell-repeats-vertex": (
        "nOFF\n2\n3 2 0\n0 0\n1 0\n0 1\n# two edges\n2 0 1\n2 2 2\n",
        "auto",
        9,
        ("distinct", "cell 1", "2 twice"),
    ),
    "polygon-repeats-vertex": (
        "nOFF\n2\n3 1 0\n0 0\n1 0\n0 1\n\n4 0 1 2 1\n", "auto", 8, ("distinct", "cell 0", "1 twice")
    ),
    "trailing-lines": (TRI + "\n# done\n7 7\n", "auto", 10, ("end of the file after 1 cells", "'7 7'")),
    "mesh-without-cells": ("nOFF\n4\n5 0 0\n", "mesh", 3, ("at least one cell for a SimplexMesh",)),
    "mesh-polygon-cell": (TRI, "mesh", 7, ("cells of n = 2 vertices", "cell 0 has 3")),
    # shape checks after a clean parse: the message still names the source
    "duplicate-vertices": (
        "nOFF\n4\n5 0 0\n" + "1 2 3 4\n" * 5, "auto", SHAPE, ("5 distinct points", "got 1")
    ),
    "flat-vertices": (
        "nOFF\n4\n5 0 0\n0 0 0 0\n1 0 0 0\n0 1 0 0\n0 0 1 0\n1 1 1 0\n", "auto", SHAPE, ("flat",)
    ),
    "open-mesh": ("nOFF\n2\n3 2 0\n0 0\n1 0\n0 1\n2 0 1\n2 1 2\n", "mesh", SHAPE, ("not closed",)),
    # bytes that are not nOFF text
    "gzip": (gzip.compress(TRI.encode()), "auto", 1, ("gzip-compressed", "1f 8b")),
    "bzip2": (bz2.compress(TRI.encode()), "auto", 1, ("bzip2-compressed",)),
    "xz": (lzma.compress(TRI.encode()), "auto", 1, ("xz-compressed",)),
    "utf16": (TRI.encode("utf-16"), "auto", 1, ("UTF-16",)),
    "binary-garbage": (_GARBAGE, "auto", 1, ("looks binary",)),
    "nul-byte": (b"nOFF\n2\n3 1 0\n0 0\x00\n", "auto", 4, ("control byte 0x00", "byte offset 16")),
    "latin1-comment": (
        b"OFF  # caf\xe9\n1 0 0\n0 0 1\n", "auto", 1, ("byte 0xe9 at byte offset 10", "UTF-8")
    ),
    "latin1-later-line": (
        b"nOFF\n2\n# ok\n# na\xefve\n3 1 0\n", "auto", 4, ("byte 0xef at byte offset 16", "Latin-1")
    ),
    "bom-then-latin1": (
        b"\xef\xbb\xbfnOFF\n2\n# \xb0\n", "auto", 3, ("byte 0xb0 at byte offset 12", "not valid UTF-8")
    ),
}


@pytest.mark.parametrize("case", list(HOSTILE), ids=list(HOSTILE))
def test_hostile_files_fail_with_source_and_line(case: str, tmp_path: Path) -> None:
    """Each hostile file raises InputError (nothing else), naming the path, the line and the fault."""
    content, kind, line, fragments = HOSTILE[case]
    path = tmp_path / f"{case}.off"
    path.write_bytes(content.encode() if isinstance(content, str) else content)
    with pytest.raises(InputError) as err:
        read_noff(path, kind=kind)  # type: ignore[arg-type]
    assert type(err.value) is InputError
    msg = str(err.value)
    assert msg.startswith(f"{path}: ")
    if line is None:
        assert "end of file (after line" in msg
    elif line == SHAPE:
        assert msg.startswith(f"{path}: points: ") or msg.startswith(f"{path}: cells: ")
    else:
        assert f": line {line}:" in msg
    for fragment in fragments:
        assert fragment in msg
    assert len(msg) < 600  # hostile lines are cut, not echoed whole


def test_hostile_cases_are_many_and_distinct() -> None:
    """The table covers at least 20 hostile inputs, with no content repeated."""
    contents = [c if isinstance(c, bytes) else c.encode() for c, *_ in HOSTILE.values()]
    assert len(HOSTILE) >= 20 and len(set(contents)) == len(contents)


def test_byte_order_mark_and_line_endings_are_accepted(tmp_path: Path) -> None:
    """A UTF-8 byte-order mark is skipped (bytes and str); CRLF and lone CR end lines as LF does, and
    line numbers count them the same way."""
    path = tmp_path / "bom.off"
    path.write_bytes(b"\xef\xbb\xbf" + TRI.encode())
    poly = read_noff(path)
    assert isinstance(poly, ConvexPolytope) and len(poly.vertices) == 3
    assert parse_noff("\ufeff" + TRI).dim == 2
    assert parse_noff(TRI.encode()).cells[0].tolist() == [0, 1, 2]
    for eol in ("\r\n", "\r"):
        data = parse_noff(TRI.replace("\n", eol))
        np.testing.assert_array_equal(data.vertices, [[0, 0], [1, 0], [0, 1]])
        with pytest.raises(InputError, match="line 7: expected vertex indices of cell 0 in 0..2, got 5"):
            parse_noff(TRI.replace("3 0 1 2", "3 0 1 5").replace("\n", eol))


def test_text_arguments_and_streams(tmp_path: Path) -> None:
    """Binary streams are read as UTF-8; a text stream that fails to decode, a missing file, a folder,
    a control character in str input and wrong argument types all raise the project's errors."""
    assert parse_noff(TRI).dim == read_noff(io.BytesIO(TRI.encode())).dim == 2
    with pytest.raises(InputError, match="gzip-compressed"):
        read_noff(io.BytesIO(gzip.compress(TRI.encode())))
    path = tmp_path / "latin1.off"
    path.write_bytes(b"# \xe9\n" + TRI.encode())
    with open(path, encoding="utf-8") as fh, pytest.raises(InputError) as err:
        read_noff(fh)
    assert str(err.value).startswith(f"{path}: the text stream could not be decoded as utf-8")
    with pytest.raises(InputError, match="could not read the file") as err:
        read_noff(tmp_path / "missing.off")
    assert isinstance(err.value.__cause__, FileNotFoundError)
    with pytest.raises(InputError, match="could not read the file"):
        read_noff(tmp_path)
    with pytest.raises(InputError, match="line 2: control character 0x01"):
        parse_noff("nOFF\n\x01\n")
    with pytest.raises(InputTypeError, match="str or bytes"):
        parse_noff(12)  # type: ignore[arg-type]
    with pytest.raises(InputTypeError, match="path or a file object"):
        read_noff(12)  # type: ignore[arg-type]
    with pytest.raises(InputTypeError, match="max_vertices"):
        read_noff(io.StringIO(TRI), max_vertices=2.5)  # type: ignore[arg-type]
    with pytest.raises(InputError, match="max_cells: expected a positive integer"):
        parse_noff(TRI, max_cells=0)
    with pytest.raises(InputError, match="kind: expected 'auto', 'mesh' or 'polytope'"):
        read_noff(io.StringIO(TRI), kind="hull")  # type: ignore[arg-type]


def test_caps_refuse_at_the_counts_line(monkeypatch: pytest.MonkeyPatch) -> None:
    """Counts above a cap are refused at the counts line, naming the count and the cap; passing a
    larger cap reads the file."""
    with pytest.raises(InputError, match=r"line 3: .*declares 3 vertices, more .*cap of 2 \(max_vertices\)"):
        parse_noff(TRI, max_vertices=2)
    with pytest.raises(InputError, match=r"line 3: .*declares 2 cells, more .*cap of 1 \(max_cells\)"):
        parse_noff(TRI.replace("3 1 0", "3 2 0") + "3 2 1 0\n", max_cells=1)
    with monkeypatch.context() as m:
        m.setattr(noff, "MAX_VERTICES", 2)
        with pytest.raises(InputError, match=r"line 3: .*3 vertices, .*cap of 2 \(MAX_VERTICES\)"):
            parse_noff(TRI)
        assert len(parse_noff(TRI, max_vertices=3).vertices) == 3
    with monkeypatch.context() as m:
        m.setattr(noff, "MAX_CELLS", 0)
        with pytest.raises(InputError, match=r"1 cells, more than the reader's cap of 0 \(MAX_CELLS\)"):
            parse_noff(TRI)
    with monkeypatch.context() as m:
        # a hull's cap depends on the dimension; with no cells, "auto" knows at the counts line
        m.setitem(noff.MAX_HULL_VERTICES, 4, 4)
        with pytest.raises(InputError, match=r"line 3: .*5 vertices, .*cap of 4 \(MAX_HULL_VERTICES\[4\]"):
            read_noff(io.StringIO(SIMPLEX_TEXT))
        with pytest.raises(InputError, match=r"line 3: .*MAX_HULL_VERTICES\[4\]"):
            read_noff(io.StringIO(GOOD + "3 0 1 2\n" * 5), kind="polytope")
        # "auto" with cells that are not simplices learns only after reading them that it builds a hull
        with pytest.raises(InputError, match=r"not all \(3\)-simplices.*5 vertices exceed its cap of 4"):
            read_noff(io.StringIO(GOOD + "3 0 1 2\n" * 5))
        assert isinstance(read_noff(io.StringIO(SIMPLEX_TEXT), max_vertices=5), ConvexPolytope)
    with monkeypatch.context() as m:
        m.setattr(noff, "MAX_FILE_SIZE", 20)
        with pytest.raises(InputError, match="more than MAX_FILE_SIZE = 20 bytes"):
            read_noff(io.BytesIO(TRI.encode()))


def test_ten_to_the_six_vertices_without_cells_are_refused_before_reading(tmp_path: Path) -> None:
    """A file declaring 10^6 vertices and no cells, with text enough to hold them, is refused at its
    counts line by the hull cap ("auto" and "polytope") and the no-cells check ("mesh")."""
    text = "nOFF\n4\n1000000 0 0\n#" + "x" * 8_000_000 + "\n"
    for kind, fragment in [
        ("auto", "MAX_HULL_VERTICES[4]"),
        ("polytope", "MAX_HULL_VERTICES[4]"),
        ("mesh", "at least one cell"),
    ]:
        with pytest.raises(InputError, match="line 3: ") as err:
            read_noff(io.StringIO(text), kind=kind)  # type: ignore[arg-type]
        assert fragment in str(err.value)


HUGE_COUNTS = {
    # short: read to its end (sized by the count, the array would take 104 GB)
    "short-file": ("nOFF\n13\n1000000000 0 0\n" + "1 " * 13 + "\n", "vertex 1 of 1000000000"),
    # long: refused at the counts line
    "long-file": ("nOFF\n13\n1000000000 0 0\n" + BIG_BODY, "declares 1000000000 vertices"),
    # text enough for the count (a long comment), above MAX_VERTICES: refused at the counts line
    "over-cap": ("nOFF\n2\n600000 0 0\n#" + "x" * 2_400_000 + "\n", "cap of 500000 (MAX_VERTICES)"),
    # cells: read to the end
    "cells": ("nOFF\n4\n20 1000000000 0\n" + "1 2 3 4\n" * 20 + "3 0 1 2\n", "cell 1 of 1000000000"),
}


@pytest.mark.parametrize("case", list(HUGE_COUNTS), ids=list(HUGE_COUNTS))
def test_huge_declared_counts_allocate_nothing(case: str) -> None:
    """A huge declared count fails without memory in proportion to it: the peak traced allocation
    while parsing stays under 10 MB (the text itself exists before tracing starts)."""
    text, fragment = HUGE_COUNTS[case]
    tracemalloc.start()
    try:
        with pytest.raises(InputError, match=re.escape(fragment)):
            parse_noff(text)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 10 * 2**20, peak


def test_reading_a_path_reserves_little(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """Reading a small file by path, whatever its counts, peaks under 10 MB of traced memory (a read
    sized by the file cap would reserve 256 MiB); a path larger than MAX_FILE_SIZE is refused by its
    size."""
    path = tmp_path / "huge-count.off"
    path.write_text("nOFF\n4\n1000000000 0 0\n1 2 3 4\n")
    tracemalloc.start()
    try:
        with pytest.raises(InputError, match="vertex 1 of 1000000000"):
            read_noff(path)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 10 * 2**20, peak
    monkeypatch.setattr(noff, "MAX_FILE_SIZE", 20)
    with pytest.raises(InputError, match=r"holds 30 bytes, more than MAX_FILE_SIZE = 20"):
        read_noff(path)


def test_generators_give_valid_meshes_and_cyclic_polytopes() -> None:
    """The timing generators below make what their names say: a closed outward mesh, and points in
    cyclic position, whose 4-D hull has the upper bound theorem's N (N - 3) / 2 facets."""
    mesh = read_noff(io.StringIO(mesh_text(60, 4)))
    assert isinstance(mesh, SimplexMesh) and mesh.mass_properties().volume > 0.0
    poly = read_noff(io.StringIO(cyclic_text(30, 4)))
    assert isinstance(poly, ConvexPolytope) and len(poly.vertices) == 30
    assert len(poly.facet_normals) == 30 * 27 // 2
    with pytest.raises(InputError, match="not closed"):
        read_noff(io.StringIO(points_text(10, 3)), kind="mesh")


# ---------------------------------------------------------------------------------------------
# Generators for the caps' timings in core/geometry/noff.py: python tests/test_noff.py KIND N n
# ---------------------------------------------------------------------------------------------


def _rows(P: np.ndarray) -> str:
    return "".join(" ".join(repr(float(x)) for x in r) + "\n" for r in P)


def _on_sphere(N: int, n: int, seed: int = 0) -> np.ndarray:
    P = np.random.default_rng(seed).normal(size=(N, n))
    return P / np.linalg.norm(P, axis=1, keepdims=True)


def mesh_text(N: int, n: int) -> str:
    """The boundary of the hull of N random points on the unit sphere, cells turned outward."""
    from scipy.spatial import ConvexHull

    P = _on_sphere(N, n)
    S = ConvexHull(P).simplices.copy()
    flip = np.linalg.det(P[S] - P.mean(axis=0)) < 0
    S[flip, 0], S[flip, 1] = S[flip, 1].copy(), S[flip, 0].copy()
    cells = "".join(f"{n} " + " ".join(map(str, c)) + "\n" for c in S.tolist())
    return f"nOFF\n{n}\n{N} {len(S)} 0\n" + _rows(P) + cells


def cyclic_text(N: int, n: int, random_t: bool = False) -> str:
    """N points (cos t, cos 2t, ..., cos nt), 0 < t < pi: an affine image of the moment curve, so a
    cyclic polytope, the most facets N points can have (evenly spaced t, or uniform with random_t)."""
    rng = np.random.default_rng(0)
    t = np.sort(rng.uniform(0, np.pi, N)) if random_t else (np.arange(N) + 0.5) * np.pi / N
    return f"nOFF\n{n}\n{N} 0 0\n" + _rows(np.cos(np.outer(t, np.arange(1, n + 1))))


def sphere_text(N: int, n: int) -> str:
    """N random points on the unit sphere and no cells."""
    return f"nOFF\n{n}\n{N} 0 0\n" + _rows(_on_sphere(N, n))


def points_text(N: int, n: int) -> str:
    """N random vertex lines and one cell (a mesh read refuses it as not closed, after reading all)."""
    P = np.random.default_rng(0).normal(size=(N, n))
    return f"nOFF\n{n}\n{N} 1 0\n" + _rows(P) + f"{n} " + " ".join(map(str, range(n))) + "\n"


def comments_text(mib: int) -> str:
    """``mib`` MiB of 80-character comment lines, then a 2-D triangle."""
    line = "# " + "x" * 77 + "\n"
    return line * (mib * 2**20 // len(line)) + TRI


def full_text(N: int, n: int) -> str:
    """N vertices with exponents up to +-300 and N cells of n random indices: the file size at N."""
    rng = np.random.default_rng(0)
    P = rng.normal(size=(N, n)) * 10.0 ** rng.integers(-300, 300, size=(N, n))
    cells = "".join(f"{n} " + " ".join(map(str, c)) + "\n" for c in rng.integers(0, N, size=(N, n)).tolist())
    return f"nOFF\n{n}\n{N} {N} 0\n" + _rows(P) + cells


def _timing_main(argv: list[str]) -> None:
    """Print the shape (or the refusal), the file size and read_noff's seconds for one generated file.

    KIND is mesh (read as a SimplexMesh), cyclic or sphere (as a ConvexPolytope), points (as a mesh),
    comments (N MiB, as a polytope) or full (file size only); --random-t for cyclic, --mem for the
    peak traced memory of a second read.
    """
    import time

    kind_, N, n = argv[0], int(argv[1]), int(argv[2])
    text = {
        "mesh": lambda: mesh_text(N, n),
        "cyclic": lambda: cyclic_text(N, n, "--random-t" in argv),
        "sphere": lambda: sphere_text(N, n),
        "points": lambda: points_text(N, n),
        "comments": lambda: comments_text(N),
        "full": lambda: full_text(N, n),
    }[kind_]()
    data = text.encode()
    size = f"file {len(data) / 2**20:.1f} MiB"
    if kind_ == "full":
        print(f"full n={n} N={N}: {size}")
        return
    kind = "mesh" if kind_ in ("mesh", "points") else "polytope"

    def read() -> str:
        try:
            shape = read_noff(io.BytesIO(data), kind=kind, max_vertices=max(N, 3), max_cells=max(N * 100, 1))
            return repr(shape)
        except InputError as exc:
            return f"InputError: {str(exc)[:100]}"

    t0 = time.perf_counter()
    shape = read()
    print(f"{kind_} n={n} N={N}: {shape}; {size}; read+build {time.perf_counter() - t0:.2f} s")
    if "--mem" in argv:
        tracemalloc.start()
        read()
        print(f"  peak traced memory {tracemalloc.get_traced_memory()[1] / 2**20:.0f} MiB")


if __name__ == "__main__":
    import sys

    _timing_main(sys.argv[1:])
