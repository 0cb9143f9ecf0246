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

Untrusted files. Reading raises only :class:`InputError` (or :class:`InputTypeError` for a wrong
argument type), and each message names the source and, where there is one, the line. The text is
UTF-8 (ASCII included); a leading byte-order mark is skipped, and other encodings are refused with
the byte offset and line of the first byte that is not UTF-8. Compressed or archived files (gzip,
bzip2, xz, zstd, zip), UTF-16/32 text and binary content (control characters) are refused by name.
Numbers are plain ASCII decimals; coordinates must be finite; a cell may not repeat a vertex. The
counts line is checked before anything is sized by it: against the text that follows (a vertex
line takes at least 2n characters, a cell line 4) and against the caps below, which
:func:`read_noff` and :func:`parse_noff` take as ``max_vertices`` / ``max_cells`` to read bigger
files on purpose.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass
from typing import IO, Any, Literal

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError, InputTypeError
from .shapes import ConvexPolytope, SimplexMesh

__all__ = [
    "MAX_CELLS",
    "MAX_DIMENSION",
    "MAX_FILE_SIZE",
    "MAX_HULL_VERTICES",
    "MAX_VERTICES",
    "NoffData",
    "format_noff",
    "parse_noff",
    "read_noff",
    "write_noff",
]

# ---------------------------------------------------------------------------------------------
# Caps on what a file may ask for, checked on its header and counts before any vertex is read.
# Timings are read_noff's (reading the file and building the shape) on the development machine, one
# core, measured with the generators at the end of tests/test_noff.py, run from the repository root:
#   python tests/test_noff.py KIND N n      (KIND: mesh, cyclic, sphere, points, comments, full)
# The machine is shared, and repeated runs differed by up to 30 %; ranges are from two runs.
# ---------------------------------------------------------------------------------------------

#: Largest dimension n read. ConvexPolytope builds regular_simplex(13) and refuses
#: regular_simplex(14) as flat (its volume test; measured: python -c "from ndrigid.core.geometry.
#: polytopes import regular_simplex; regular_simplex(14)"), so no simplex of unit size is built
#: above 13-D; the cap also keeps absurd headers (n = 10^30, for which np.empty((0, n)) raises)
#: out of the arithmetic.
MAX_DIMENSION = 13

#: Cells of a file. A closed mesh of about this many cells reads and builds in about 2.5 s: "mesh
#: 74000 4" (499 993 cells, 17.7 MiB) 2.26-2.41 s, "mesh 250000 3" (499 996 cells) 2.53 s, "mesh
#: 500000 2" (499 824 cells) 2.61-2.70 s, "mesh 16000 5" (491 058 cells) 2.41 s.
MAX_CELLS = 500_000

#: Vertices of a file (closed meshes have about as many vertices as cells in 2-D, fewer above, as in
#: the meshes measured for MAX_CELLS). Reading this many vertex lines and one cell, refused by
#: SimplexMesh as not closed: "points 500000 4" (37.4 MiB) 1.22 s, "points 500000 13" (121.7 MiB)
#: 2.80-3.58 s.
MAX_VERTICES = 500_000

#: Vertices of a file read as a ConvexPolytope (the hull of all its vertices), by dimension n. N
#: points can have as many hull facets as the cyclic polytope, of the order of N^floor(n/2) (the
#: upper bound theorem: P. McMullen, "The maximum numbers of faces of a convex polytope",
#: Mathematika 17, 1970), and the build time follows the facets, so the cap falls steeply with n.
#: Each value holds the worst case, N points on the moment curve ("cyclic N n"), to under 2 s but
#: in 4-D, whose cap is set by the 120-cell. Measured read + build at the cap: 2-D 0.46 s (random
#: points on the circle, "sphere", 0.86 s), 3-D 1.52 s (sphere 1.67 s), 4-D 4.18-5.07 s (162 566
#: facets; 600 random points on the sphere take 0.10 s, the 120-cell 0.03 s), 5-D 1.07 s, 6-D
#: 1.52 s (hypercube(6) has 64 vertices), 7-D 1.68 s (random t, "--random-t": evenly spaced t makes
#: qhull fail), 8-D 1.40 s, 9-D 0.71 s, 10-D 0.81 s, 11-D 0.39 s, 12-D 0.62 s, 13-D 0.64 s.
#: hypercube(n) for n >= 7 and orthoplex(n) for n >= 11 have more vertices than the cap and need
#: max_vertices.
MAX_HULL_VERTICES: dict[int, int] = {
    2: 100_000,
    3: 20_000,
    4: 600,
    5: 200,
    6: 64,
    7: 50,
    8: 32,
    9: 26,
    10: 22,
    11: 20,
    12: 20,
    13: 20,
}

#: Bytes (characters, for a text stream) read from one source. The largest file within the caps
#: above, 13-D with 500 000 vertices (exponents to +-300) and 500 000 cells, is 188.6 MiB ("full
#: 500000 13"); reading 255 MiB of comment lines before a triangle takes 3.69 s at a peak traced
#: memory of 510 MiB, the bytes and their text ("comments 255 2 --mem"). A path is refused by its
#: size before it is read.
MAX_FILE_SIZE = 256 * 2**20

#: Bytes read and checked for a compressed or binary signature before the rest of a source is
#: read, so that /dev/zero or /dev/urandom is refused without reading on: each is refused in under
#: 0.2 ms at a peak traced memory of 0.01 MiB (python -c "from ndrigid.core.geometry.noff import
#: read_noff; read_noff('/dev/zero')", under tracemalloc).
_HEAD = 4096

#: Bytes (characters) asked of a source per read after the head. A buffered file's read(size)
#: reserves ``size`` bytes first, so one read of MAX_FILE_SIZE would reserve 256 MiB for a file of
#: 30 bytes (measured: a peak traced memory of 256 MiB); with 1 MiB chunks such a file peaks at
#: 1 MiB, and 255 MiB read in chunks of 64 KiB, 1 MiB and 16 MiB take 0.32, 0.23 and 0.24 s
#: (noff._read_limited on an open file, timed with time.perf_counter).
_CHUNK = 2**20

#: Characters after the counts line up to which a file too short for its counts is read line by
#: line, to name the line where it goes wrong (a short vertex line, the end of the file), rather
#: than refused at its counts line. Parsing 65 525 characters of 4-D vertex lines under a count of
#: 10^9 to the end of the file takes 4.4 ms; 75 characters more and it is refused at the counts
#: line in 0.2 ms (parse_noff on "nOFF\n4\n1000000000 0 0\n" + "0.123456789 -0.5 1e-3 42\n" * k).
_SCAN_LIMIT = 64 * 1024

# Leading bytes of formats that are surely not nOFF text, and what to call them in the message.
_SIGNATURES: tuple[tuple[bytes, str], ...] = (
    (b"\x1f\x8b", "gzip-compressed; decompress it first (gunzip)"),
    (b"BZh", "bzip2-compressed; decompress it first (bunzip2)"),
    (b"\xfd7zXZ\x00", "xz-compressed; decompress it first (unxz)"),
    (b"\x28\xb5\x2f\xfd", "zstd-compressed; decompress it first (unzstd)"),
    (b"PK\x03\x04", "a zip archive; extract the nOFF file from it first"),
    (b"\x00\x00\xfe\xff", "UTF-32 text (byte-order mark 00 00 fe ff); save it as UTF-8 or ASCII"),
    (b"\xff\xfe", "UTF-16 or UTF-32 text (byte-order mark ff fe); save it as UTF-8 or ASCII"),
    (b"\xfe\xff", "UTF-16 text (byte-order mark fe ff); save it as UTF-8 or ASCII"),
)
_BOM = b"\xef\xbb\xbf"
# control characters other than the whitespace ones (tab, newline, vertical tab, form feed, return)
_CONTROL_BYTES = re.compile(rb"[\x00-\x08\x0e-\x1f\x7f]")
_CONTROL_CHARS = re.compile(r"[\x00-\x08\x0e-\x1f\x7f]")
_INT = re.compile(r"[+-]?[0-9]+")


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


def _show(text: str, limit: int = 60) -> str:
    """repr of ``text``, cut to about ``limit`` characters (a hostile line can be megabytes long)."""
    return repr(text) if len(text) <= limit else repr(text[:limit]) + f"... ({len(text)} characters)"


def _line_at(data: bytes | str, end: int) -> int:
    """1-based line number of offset ``end`` (lines end at \\n, \\r\\n or a lone \\r)."""
    if isinstance(data, bytes):
        head = data[:end]
        return head.count(b"\n") + head.count(b"\r") - head.count(b"\r\n") + 1
    text = data[:end]
    return text.count("\n") + text.count("\r") - text.count("\r\n") + 1


def _check_signature(data: bytes, where: str) -> None:
    """Refuse compressed, archived or UTF-16/32 content by its first bytes."""
    for magic, what in _SIGNATURES:
        if data.startswith(magic) and (magic != b"BZh" or data[3:4].isdigit()):
            shown = " ".join(f"{b:02x}" for b in magic)
            raise InputError(
                f"{where}: line 1: the file looks {what} (it starts with the bytes {shown}); "
                "nOFF is read as plain text"
            )


def _check_control(data: bytes | str, where: str) -> None:
    """Refuse content holding a control character that is not whitespace (binary content)."""
    if isinstance(data, bytes):
        m: re.Match[Any] | None = _CONTROL_BYTES.search(data)
        unit = "byte"
    else:
        m = _CONTROL_CHARS.search(data)
        unit = "character"
    if m is not None:
        raise InputError(
            f"{where}: line {_line_at(data, m.start())}: control {unit} 0x{ord(m.group()):02x} at "
            f"{unit} offset {m.start()}; the file looks binary (or compressed), not nOFF text"
        )


def _decode(data: bytes, where: str) -> str:
    """UTF-8 text of ``data`` (a leading byte-order mark skipped), or an InputError saying where not."""
    _check_signature(data, where)
    _check_control(data, where)
    skip = len(_BOM) if data.startswith(_BOM) else 0
    try:
        return data[skip:].decode("utf-8")
    except UnicodeDecodeError as exc:
        at = exc.start + skip
        raise InputError(
            f"{where}: line {_line_at(data, at)}: byte 0x{data[at]:02x} at byte offset {at} is not "
            "valid UTF-8 (nOFF is read as UTF-8, of which ASCII is a part); the file may be in another "
            "encoding such as Latin-1 (save it as UTF-8) or binary"
        ) from None


class _Lines:
    """Non-empty, comment-stripped lines as (line number, tokens), consumed in order.

    Each line is cut from the text when it is asked for, so nothing is held per line beyond the
    one being read.
    """

    def __init__(self, text: str, where: str) -> None:
        if "\r" in text:
            text = text.replace("\r\n", "\n").replace("\r", "\n")
        self.text = text
        self.where = where
        self.pos = 0  # offset of the next unread line
        self.no = 0  # number of the last line read

    def fail(self, line: int | None, expected: str, got: str) -> InputError:
        at = f"line {line}" if line is not None else f"end of file (after line {self.no})"
        return InputError(f"{self.where}: {at}: expected {expected}, got {got}")

    def next(self) -> tuple[int, list[str]] | None:
        """The next non-empty line, or None at the end of the text."""
        text, size = self.text, len(self.text)
        while self.pos < size:
            end = text.find("\n", self.pos)
            if end < 0:
                end = size
            raw = text[self.pos : end]
            self.pos = end + 1
            self.no += 1
            cut = raw.find("#")
            tok = (raw if cut < 0 else raw[:cut]).split()
            if tok:
                return self.no, tok
        return None

    def need(self, expected: str) -> tuple[int, list[str]]:
        """The next non-empty line; its absence is an error saying what was ``expected``."""
        item = self.next()
        if item is None:
            raise self.fail(None, expected, "the end of the file")
        return item

    def remaining(self) -> int:
        """Characters after the lines read so far."""
        return max(len(self.text) - self.pos, 0)


def _int(lines: _Lines, no: int, tok: str, what: str) -> int:
    """An ASCII decimal integer (int() alone would also take "1_000" and other scripts' digits)."""
    if _INT.fullmatch(tok):
        try:
            return int(tok)
        except ValueError:  # more digits than Python converts (sys.get_int_max_str_digits)
            pass
    raise lines.fail(no, what, _show(tok))


def _cap(name: str, value: Any) -> int | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise InputTypeError(f"{name}: expected a positive integer or None, got {value!r}")
    if int(value) < 1:
        raise InputError(f"{name}: expected a positive integer or None, got {int(value)}")
    return int(value)


@dataclass(frozen=True, eq=False)
class _Parsed:
    """What _parse read: the cells as one flat index array with their sizes and line numbers."""

    dim: int
    vertices: NDArray[np.float64]
    flat: NDArray[np.intp]
    sizes: list[int]
    cell_lines: list[int]
    edge_count: int

    def uniform(self) -> int | None:
        """The common vertex count of the cells, or None (no cells, or sizes differ)."""
        if not self.sizes:
            return None
        m = self.sizes[0]
        return m if min(self.sizes) == max(self.sizes) == m else None

    def cells(self) -> tuple[NDArray[np.intp], ...]:
        m = self.uniform()
        if m is not None:
            return tuple(self.flat.reshape(len(self.sizes), m))
        return tuple(np.split(self.flat, np.cumsum(self.sizes[:-1]))) if self.sizes else ()


def parse_noff(
    text: str | bytes,
    *,
    where: str = "nOFF",
    max_vertices: int | None = None,
    max_cells: int | None = None,
) -> NoffData:
    """Parse nOFF text (the module notes give the dialect); ``where`` names the source in errors.

    ``text`` may also be bytes, read as UTF-8 (a byte-order mark is skipped). ``max_vertices`` and
    ``max_cells`` replace the caps :data:`MAX_VERTICES` and :data:`MAX_CELLS`.

    Raises:
        InputError: naming the source, the line number and what was expected there.
    """
    p = _parse(text, str(where), "data", _cap("max_vertices", max_vertices), _cap("max_cells", max_cells))
    return NoffData(dim=p.dim, vertices=p.vertices, cells=p.cells(), edge_count=p.edge_count)


def _hull_cap(n: int) -> int:
    """MAX_HULL_VERTICES[n]; the smallest entry for a dimension the table lacks."""
    return MAX_HULL_VERTICES.get(n, min(MAX_HULL_VERTICES.values()))


def _check_caps(
    where: str, no: int, n: int, nv: int, nc: int, kind: str, max_vertices: int | None, max_cells: int | None
) -> None:
    """Refuse counts above the caps (MAX_HULL_VERTICES[n] when read_noff will build a hull)."""
    if max_vertices is not None:
        vcap, vname = max_vertices, "max_vertices"
    elif kind == "polytope" or (kind == "auto" and nc == 0):
        vcap, vname = _hull_cap(n), f"MAX_HULL_VERTICES[{n}], for a ConvexPolytope"
    else:
        vcap, vname = MAX_VERTICES, "MAX_VERTICES"
    if nv > vcap:
        raise InputError(
            f"{where}: line {no}: the counts line declares {nv} vertices, more than the reader's cap of "
            f"{vcap} ({vname}); pass a larger max_vertices to read it"
        )
    ccap, cname = (max_cells, "max_cells") if max_cells is not None else (MAX_CELLS, "MAX_CELLS")
    if nc > ccap:
        raise InputError(
            f"{where}: line {no}: the counts line declares {nc} cells, more than the reader's cap of "
            f"{ccap} ({cname}); pass a larger max_cells to read it"
        )


def _parse(
    text: str | bytes, where: str, kind: str, max_vertices: int | None, max_cells: int | None
) -> _Parsed:
    """parse_noff's work; ``kind`` is what read_noff will build ("data" for parse_noff alone), so
    that a file too big for that shape is refused at its counts line."""
    if isinstance(text, (bytes, bytearray, memoryview)):
        text = _decode(bytes(text), where)
    elif isinstance(text, str):
        text = text.removeprefix("\ufeff")
        _check_control(text, where)
    else:
        raise InputTypeError(f"text: expected the nOFF content as str or bytes, got {type(text).__name__}")
    lines = _Lines(text, where)
    no, tok = lines.need("the header 'nOFF' or 'OFF'")
    head, rest = tok[0], tok[1:]
    if head == "OFF":
        n = 3
    elif head == "nOFF":
        if not rest:
            no, rest = lines.need("the dimension n after 'nOFF'")
        want = f"the dimension n (an integer in 2..{MAX_DIMENSION}, MAX_DIMENSION)"
        n = _int(lines, no, rest[0], want)
        if not 2 <= n <= MAX_DIMENSION:
            raise lines.fail(no, want, _show(rest[0]))
        rest = rest[1:]
    elif head.endswith("OFF"):
        raise lines.fail(
            no,
            "the header 'nOFF' or 'OFF' (vertex colours, normals, texture coordinates "
            "and homogeneous coordinates are not supported)",
            _show(head),
        )
    else:
        raise lines.fail(no, "the header 'nOFF' or 'OFF'", _show(head))
    if rest:
        raise lines.fail(no, "nothing more on the header line", _show(" ".join(rest)))

    counts_what = "the counts line 'V C E' (vertices, cells, edges)"
    no, tok = lines.need(counts_what)
    if len(tok) not in (2, 3):
        raise lines.fail(no, counts_what, _show(" ".join(tok)))
    counts = [_int(lines, no, t, "integer counts 'V C E'") for t in tok]
    nv, nc = counts[0], counts[1]
    ne = counts[2] if len(counts) == 3 else 0
    if nv < 0 or nc < 0 or ne < 0:
        raise lines.fail(no, "non-negative counts 'V C E'", _show(" ".join(tok)))
    if kind == "mesh" and nc == 0:
        raise lines.fail(no, "at least one cell for a SimplexMesh", _show(" ".join(tok)))
    # Nothing is sized by the counts before they are checked against the text that follows: a vertex
    # line holds n numbers and n - 1 separators and ends in a newline (the file's last line may not),
    # a cell line at least "1 i\n". A file too short for its counts is refused here at once, unless
    # so little follows (_SCAN_LIMIT) that reading it for the line where it goes wrong costs nothing.
    need = 2 * n * nv + 4 * nc - 1 if nv or nc else 0
    room = lines.remaining()
    if need > room and room > _SCAN_LIMIT:
        raise InputError(
            f"{where}: line {no}: the counts line declares {nv} vertices and {nc} cells, which need at "
            f"least {need} characters ({2 * n} per vertex of {n} coordinates, 4 per cell), but only "
            f"{room} follow it in a file of {len(lines.text)} characters; the file is truncated or its "
            "counts are wrong"
        )
    if need <= room:  # the counts fit the text; now they must be within the caps
        _check_caps(where, no, n, nv, nc, kind, max_vertices, max_cells)

    # no more rows than the text can hold (when the counts do not fit, reading fails before the last)
    V = np.empty((min(nv, (room + 1) // (2 * n)), n))
    for v in range(nv):
        item = lines.next()
        if item is None:
            raise lines.fail(None, f"vertex {v} of {nv} ({n} coordinates)", "the end of the file")
        no, tok = item
        if len(tok) != n:
            raise lines.fail(
                no, f"{n} coordinates for vertex {v}", f"{len(tok)} values ({_show(' '.join(tok))})"
            )
        row: list[float] | None
        try:
            row = [float(t) for t in tok]
        except ValueError:
            row = None
        # float() also takes "1_000" and other scripts' digits, which are no plain decimals
        if row is None or not all(t.isascii() and "_" not in t for t in tok):
            raise lines.fail(no, f"{n} numbers for vertex {v}", _show(" ".join(tok)))
        if not all(map(math.isfinite, row)):
            raise lines.fail(no, f"finite coordinates for vertex {v}", _show(" ".join(tok)))
        V[v] = row

    flat: list[int] = []
    sizes: list[int] = []
    cell_lines: list[int] = []
    for c in range(nc):
        item = lines.next()
        if item is None:
            raise lines.fail(None, f"cell {c} of {nc} ('m i_0 ... i_(m-1)')", "the end of the file")
        no, tok = item
        t0 = tok[0]
        m = int(t0) if len(t0) < 10 and t0.isascii() and t0.isdigit() else _int(
            lines, no, t0, f"the vertex count of cell {c}"
        )
        if m < 1 or len(tok) < m + 1:
            raise lines.fail(
                no, f"cell {c} as a vertex count m >= 1 followed by m indices", _show(" ".join(tok))
            )
        digits = "".join(tok[1 : m + 1])
        idx: list[int] | None
        try:  # plain ASCII digits convert at once; anything else goes token by token, for the message
            idx = list(map(int, tok[1 : m + 1])) if digits.isascii() and digits.isdigit() else None
        except ValueError:
            idx = None
        if idx is None:
            idx = [_int(lines, no, t, f"integer vertex indices for cell {c}") for t in tok[1 : m + 1]]
        if max(idx) >= nv or min(idx) < 0:
            bad = next(i for i in idx if not 0 <= i < nv)
            span = f"0..{nv - 1}" if nv else "0..-1 (the file declares no vertices)"
            raise lines.fail(no, f"vertex indices of cell {c} in {span}", str(bad))
        flat += idx
        sizes.append(m)
        cell_lines.append(no)
    extra = lines.next()
    if extra is not None:
        no, tok = extra
        raise lines.fail(no, f"the end of the file after {nc} cells", _show(" ".join(tok)))

    F = np.array(flat, dtype=np.intp)
    parsed = _Parsed(n, V, F, sizes, cell_lines, ne)
    # a cell lists distinct vertices, whatever is built from it
    width = parsed.uniform()
    if width is not None:
        S = np.sort(F.reshape(nc, width), axis=1)
        rows = np.flatnonzero(np.any(S[:, 1:] == S[:, :-1], axis=1))
        first = int(rows[0]) if rows.size else None
    else:
        starts = np.cumsum([0] + sizes).tolist()[:-1]
        pairs = enumerate(zip(starts, sizes, strict=True))
        first = next((c for c, (s, k) in pairs if len(set(flat[s : s + k])) < k), None)
    if first is not None:
        listed = parsed.cells()[first].tolist()
        twice = next(i for i in listed if listed.count(i) > 1)
        raise lines.fail(cell_lines[first], f"distinct vertex indices in cell {first}", f"{twice} twice")
    V.setflags(write=False)
    F.setflags(write=False)
    return parsed


def _read_limited(read: Any, where: str) -> bytes | str:
    """All of a source through its read(size) method, up to MAX_FILE_SIZE; the head checked first."""
    limit = MAX_FILE_SIZE
    head = read(_HEAD)
    if isinstance(head, (bytes, bytearray)):
        head = bytes(head)
        _check_signature(head, where)
        _check_control(head, where)
    elif isinstance(head, str):
        _check_control(head, where)
    else:
        raise InputTypeError(f"source: read() returned {type(head).__name__}, expected str or bytes")
    chunks, total = [head], len(head)
    # in chunks: read(size) of a buffered file reserves ``size`` bytes before it reads any
    while chunks[-1] and total <= limit:
        more = read(min(_CHUNK, limit + 1 - total))
        if not isinstance(more, type(head)):
            break
        chunks.append(more)
        total += len(more)
    if total > limit:
        unit = "bytes" if isinstance(head, bytes) else "characters"
        raise InputError(
            f"{where}: the file holds more than MAX_FILE_SIZE = {limit} {unit}, more than a file within "
            "the vertex and cell caps needs"
        )
    return head[:0].join(chunks)


def _read_text(source: Any) -> tuple[str | bytes, str]:
    if isinstance(source, (str, os.PathLike)):
        where = str(os.fspath(source))
        try:
            with open(source, "rb") as fh:
                size = os.fstat(fh.fileno()).st_size  # 0 for devices and pipes: read to find out
                if size > MAX_FILE_SIZE:
                    raise InputError(
                        f"{where}: the file holds {size} bytes, more than MAX_FILE_SIZE = {MAX_FILE_SIZE}, "
                        "more than a file within the vertex and cell caps needs"
                    )
                return _read_limited(fh.read, where), where
        except InputError:
            raise
        except (OSError, ValueError) as exc:  # ValueError: a NUL in the path
            why = getattr(exc, "strerror", None) or exc
            raise InputError(f"{where}: could not read the file ({why})") from exc
    if hasattr(source, "read"):
        where = str(getattr(source, "name", "nOFF stream"))
        try:
            return _read_limited(source.read, where), where
        except UnicodeDecodeError as exc:
            enc = getattr(source, "encoding", "its encoding")
            raise InputError(
                f"{where}: the text stream could not be decoded as {enc} ({exc.reason}, byte offset "
                f"{exc.start} of the chunk being decoded); pass the path, or the file opened in binary "
                "mode, to have the byte offset and line in the file named"
            ) from None
        except OSError as exc:
            raise InputError(f"{where}: could not read the stream ({exc.strerror or exc})") from exc
    raise InputTypeError(f"source: expected a path or a file object, got {type(source).__name__}")


def read_noff(
    source: str | os.PathLike[str] | IO[str] | IO[bytes],
    kind: Literal["auto", "mesh", "polytope"] = "auto",
    *,
    max_vertices: int | None = None,
    max_cells: int | None = None,
) -> SimplexMesh | ConvexPolytope:
    """Read a shape from an nOFF file.

    Args:
        source: a path, or an open text or binary file (bytes are read as UTF-8).
        kind: "mesh" builds a :class:`SimplexMesh` from the cells (each must have n indices);
            "polytope" builds a :class:`ConvexPolytope` from the vertices (the cells are checked for
            syntax but the facets are recomputed from the hull); "auto" picks "mesh" when every cell
            is an (n-1)-simplex and "polytope" otherwise.
        max_vertices: replaces the cap on the declared vertex count, :data:`MAX_VERTICES`, or for a
            polytope :data:`MAX_HULL_VERTICES` of the file's dimension.
        max_cells: replaces the cap on the declared cell count, :data:`MAX_CELLS`.
    Raises:
        InputError: naming the source, with the line number for a malformed file, or the shape's
            own validation error; also for a file that cannot be read (the OSError is its cause),
            that is compressed, binary or not UTF-8, or that exceeds a cap (module notes).
    """
    if kind not in ("auto", "mesh", "polytope"):
        raise InputError(f"kind: expected 'auto', 'mesh' or 'polytope', got {kind!r}")
    vcap, ccap = _cap("max_vertices", max_vertices), _cap("max_cells", max_cells)
    text, where = _read_text(source)
    p = _parse(text, where, kind, vcap, ccap)
    n, nv = p.dim, len(p.vertices)
    simplicial = p.uniform() == n
    try:
        if kind == "polytope" or (kind == "auto" and not simplicial):
            cap = vcap or _hull_cap(n)
            if nv > cap:  # "auto" with cells that are not simplices: known only now
                raise InputError(
                    f"the cells are not all ({n - 1})-simplices, so 'auto' builds a ConvexPolytope, but "
                    f"the file's {nv} vertices exceed its cap of {cap} "
                    f"({'max_vertices' if vcap else f'MAX_HULL_VERTICES[{n}]'}); pass a larger "
                    "max_vertices to read it"
                )
            return ConvexPolytope(p.vertices)
        if not simplicial:
            first = next(i for i, m in enumerate(p.sizes) if m != n)
            raise InputError(
                f"line {p.cell_lines[first]}: a SimplexMesh needs cells of n = {n} vertices each; "
                f"cell {first} has {p.sizes[first]} vertices"
            )
        return SimplexMesh(p.vertices, p.flat.reshape(-1, n))
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from exc


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
