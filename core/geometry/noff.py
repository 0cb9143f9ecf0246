"""Reading and writing shapes in nOFF, the n-dimensional variant of the OFF format (Geomview project).

The dialect read and written here::

    nOFF              # header; plain "OFF" means n = 3 and has no dimension line
    4                 # the dimension n (may also follow the header on its line)
    V C E             # vertex, cell and edge counts (E is informational; it may be 0 or omitted)
    x_0 ... x_(n-1)   # V vertex lines, n coordinates each
    m i_0 ... i_(m-1) # C cell lines: a vertex count and that many vertex indices (0-based)

Comments run from ``#`` to the end of the line; blank lines are skipped. Each vertex and cell sits on
one line, so every error can name its line. Numbers after a cell's indices (Geomview allows a colour
there) are ignored. In n-D a "cell" is an (n-1)-dimensional boundary element: for a
:class:`SimplexMesh` an oriented (n-1)-simplex of n indices, for a :class:`ConvexPolytope` a facet
listed by its vertices. In 3-D this is exactly the classic OFF layout (a cell is a polygon, written
counter-clockwise seen from outside), so other 3-D tools read the files. Prefixed headers (C, N, ST,
4 for homogeneous coordinates) are rejected with a message rather than half-read.

Floats are written with ``repr``, the shortest text that reads back to the same double, so a round
trip preserves every vertex bit for bit and every cell index.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from typing import IO, Any, Literal

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError, InputTypeError
from .shapes import ConvexPolytope, SimplexMesh

__all__ = ["NoffData", "format_noff", "parse_noff", "read_noff", "write_noff"]


@dataclass(frozen=True, eq=False)
class NoffData:
    """The raw content of an nOFF file.

    Attributes:
        dim: n.
        vertices: (V, n) float.
        cells: tuple of C int arrays, the vertex indices of each cell in file order.
        edge_count: the informational edge count from the counts line (0 when absent).
    """

    dim: int
    vertices: NDArray[np.float64]
    cells: tuple[NDArray[np.intp], ...]
    edge_count: int


class _Lines:
    """Non-empty, comment-stripped lines as (line number, tokens), consumed in order."""

    def __init__(self, text: str, where: str) -> None:
        self.where = where
        self.items: list[tuple[int, list[str]]] = []
        for no, raw in enumerate(text.splitlines(), start=1):
            tok = raw.split("#", 1)[0].split()
            if tok:
                self.items.append((no, tok))
        self.pos = 0

    def fail(self, line: int | None, expected: str, got: str) -> InputError:
        at = f"line {line}" if line is not None else "end of file"
        return InputError(f"{self.where}: {at}: expected {expected}, got {got}")

    def next(self, expected: str) -> tuple[int, list[str]]:
        if self.pos >= len(self.items):
            raise self.fail(None, expected, "the end of the file")
        item = self.items[self.pos]
        self.pos += 1
        return item


def _int(lines: _Lines, no: int, tok: str, what: str) -> int:
    try:
        return int(tok)
    except ValueError:
        raise lines.fail(no, what, repr(tok)) from None


def parse_noff(text: str, *, where: str = "nOFF") -> NoffData:
    """Parse nOFF text (the module notes give the dialect); ``where`` names the source in errors.

    Raises:
        InputError: naming the line number and what was expected there.
    """
    if not isinstance(text, str):
        raise InputTypeError(f"text: expected the nOFF content as str, got {type(text).__name__}")
    lines = _Lines(text, where)
    no, tok = lines.next("the header 'nOFF' or 'OFF'")
    head, rest = tok[0], tok[1:]
    if head == "OFF":
        n = 3
    elif head == "nOFF":
        if not rest:
            no, rest = lines.next("the dimension n after 'nOFF'")
        n = _int(lines, no, rest[0], "the dimension n (an integer >= 2)")
        if n < 2:
            raise lines.fail(no, "the dimension n (an integer >= 2)", str(n))
        rest = rest[1:]
    elif head.endswith("OFF"):
        raise lines.fail(
            no,
            "the header 'nOFF' or 'OFF' (vertex colours, normals, texture coordinates "
            "and homogeneous coordinates are not supported)",
            repr(head),
        )
    else:
        raise lines.fail(no, "the header 'nOFF' or 'OFF'", repr(head))
    if rest:
        raise lines.fail(no, "nothing more on the header line", repr(" ".join(rest)))

    no, tok = lines.next("the counts line 'V C E' (vertices, cells, edges)")
    if len(tok) not in (2, 3):
        raise lines.fail(no, "the counts line 'V C E' (vertices, cells, edges)", repr(" ".join(tok)))
    counts = [_int(lines, no, t, "integer counts 'V C E'") for t in tok]
    nv, nc = counts[0], counts[1]
    ne = counts[2] if len(counts) == 3 else 0
    if nv < 0 or nc < 0 or ne < 0:
        raise lines.fail(no, "non-negative counts 'V C E'", repr(" ".join(tok)))

    V = np.empty((nv, n))
    for v in range(nv):
        no, tok = lines.next(f"vertex {v} of {nv} ({n} coordinates)")
        if len(tok) != n:
            raise lines.fail(no, f"{n} coordinates for vertex {v}", f"{len(tok)} values ({' '.join(tok)!r})")
        try:
            row = [float(t) for t in tok]
        except ValueError:
            raise lines.fail(no, f"{n} numbers for vertex {v}", repr(" ".join(tok))) from None
        if not all(math.isfinite(x) for x in row):
            raise lines.fail(no, f"finite coordinates for vertex {v}", repr(" ".join(tok)))
        V[v] = row

    cells = []
    for c in range(nc):
        no, tok = lines.next(f"cell {c} of {nc} ('m i_0 ... i_(m-1)')")
        m = _int(lines, no, tok[0], f"the vertex count of cell {c}")
        if m < 1 or len(tok) < m + 1:
            raise lines.fail(
                no, f"cell {c} as a vertex count m >= 1 followed by m indices", repr(" ".join(tok))
            )
        idx = [_int(lines, no, t, f"integer vertex indices for cell {c}") for t in tok[1 : m + 1]]
        bad = [i for i in idx if not 0 <= i < nv]
        if bad:
            raise lines.fail(no, f"vertex indices of cell {c} in 0..{nv - 1}", str(bad[0]))
        cells.append(np.array(idx, dtype=np.intp))
    if lines.pos < len(lines.items):
        no, tok = lines.items[lines.pos]
        raise lines.fail(no, f"the end of the file after {nc} cells", repr(" ".join(tok)))
    V.setflags(write=False)
    for a in cells:
        a.setflags(write=False)
    return NoffData(dim=n, vertices=V, cells=tuple(cells), edge_count=ne)


def _read_text(source: Any) -> tuple[str, str]:
    if isinstance(source, (str, os.PathLike)):
        with open(source, encoding="utf-8") as fh:
            return fh.read(), os.fspath(source)
    if hasattr(source, "read"):
        return source.read(), getattr(source, "name", "nOFF stream")
    raise InputTypeError(f"source: expected a path or a text file object, got {type(source).__name__}")


def read_noff(
    source: str | os.PathLike[str] | IO[str],
    kind: Literal["auto", "mesh", "polytope"] = "auto",
) -> SimplexMesh | ConvexPolytope:
    """Read a shape from an nOFF file.

    Args:
        source: a path or an open text file.
        kind: "mesh" builds a :class:`SimplexMesh` from the cells (each must have n indices);
            "polytope" builds a :class:`ConvexPolytope` from the vertices (the cells are checked for
            syntax but the facets are recomputed from the hull); "auto" picks "mesh" when every cell
            is an (n-1)-simplex and "polytope" otherwise.
    Raises:
        InputError: with the line number for a malformed file, or the shape's own validation error.
    """
    text, where = _read_text(source)
    data = parse_noff(text, where=where)
    n = data.dim
    if kind not in ("auto", "mesh", "polytope"):
        raise InputError(f"kind: expected 'auto', 'mesh' or 'polytope', got {kind!r}")
    simplicial = len(data.cells) > 0 and all(len(c) == n for c in data.cells)
    if kind == "polytope" or (kind == "auto" and not simplicial):
        return ConvexPolytope(data.vertices)
    if not simplicial:
        first = next(i for i, c in enumerate(data.cells) if len(c) != n) if data.cells else None
        what = f"cell {first} has {len(data.cells[first])} vertices" if first is not None else "no cells"
        raise InputError(f"{where}: a SimplexMesh needs cells of n = {n} vertices each; {what}")
    return SimplexMesh(data.vertices, np.stack(data.cells))


def format_noff(shape: SimplexMesh | ConvexPolytope) -> str:
    """nOFF text of a mesh (its cells) or a polytope (its facets, and its edge count)."""
    if isinstance(shape, SimplexMesh):
        V, cells, ne = np.asarray(shape.vertices), [np.asarray(c) for c in shape.cells], 0
    elif isinstance(shape, ConvexPolytope):
        V, cells, ne = (
            np.asarray(shape.vertices),
            [np.asarray(f) for f in shape.facet_vertices],
            len(shape.edges),
        )
    else:
        raise InputTypeError(
            f"shape: expected a SimplexMesh or ConvexPolytope (Box included), got {type(shape).__name__}"
        )
    n = V.shape[1]
    out = ["OFF" if n == 3 else f"nOFF\n{n}", f"{len(V)} {len(cells)} {ne}"]
    out += [" ".join(repr(float(x)) for x in row) for row in V]
    out += [f"{len(c)} " + " ".join(str(int(i)) for i in c) for c in cells]
    return "\n".join(out) + "\n"


def write_noff(target: str | os.PathLike[str] | IO[str], shape: SimplexMesh | ConvexPolytope) -> None:
    """Write ``shape`` as nOFF to a path or an open text file (see :func:`format_noff`)."""
    text = format_noff(shape)
    if isinstance(target, (str, os.PathLike)):
        with open(target, "w", encoding="utf-8") as fh:
            fh.write(text)
    elif hasattr(target, "write"):
        target.write(text)
    else:
        raise InputTypeError(f"target: expected a path or a text file object, got {type(target).__name__}")
