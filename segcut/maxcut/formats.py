"""Graph files: plain edge lists and GraphML, plus side-label files.

Edge list (the format the G-set is distributed in)::

    # comments start with '#', blank lines are ignored
    n m
    i j w        one line per edge: 1-based vertices, weight optional (1 when absent)

Files may be UTF-8 (with or without a byte-order mark) or UTF-16 with a byte-order
mark, with LF or CRLF line ends. Duplicate edges (in either orientation) are summed
into one edge, as :func:`segcut.graph.graph_from_edges` does. A file that cannot be
used raises :class:`segcut.errors.InputError` naming the file, the line and the
problem. GraphML (suffix ``.graphml``) is read and written through networkx; the
weight is the edge attribute ``weight`` (1 when absent).

Every write goes to a temporary file in the target folder first and then replaces
the target, so an existing file is never left half-written.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..graph import SignedGraph, as_signed_graph, graph_from_edges

__all__ = ["read_graph", "write_graph", "read_sides", "write_sides"]

_BOMS = (
    (b"\xef\xbb\xbf", "utf-8"),
    (b"\xff\xfe", "utf-16-le"),
    (b"\xfe\xff", "utf-16-be"),
)


def _is_graphml(path: Path) -> bool:
    return path.suffix.lower() == ".graphml"


def _read_bytes(path: Path) -> bytes:
    try:
        return path.read_bytes()
    except FileNotFoundError:
        raise InputError("no such file", path=path) from None
    except IsADirectoryError:
        raise InputError("is a folder, not a graph file", path=path) from None
    except OSError as err:
        raise InputError(f"cannot read: {err.strerror or err}", path=path) from None


def _decode(data: bytes, path: Path) -> str:
    """Bytes to text: honour a byte-order mark, otherwise UTF-8; refuse binary data."""
    for bom, encoding in _BOMS:
        if data.startswith(bom):
            body, name = data[len(bom):], encoding
            break
    else:
        body, name = data, "utf-8"
        # UTF-16 without a byte-order mark: every other byte of ASCII text is zero
        if len(data) >= 4 and data[1::2].count(0) > 0.9 * (len(data) // 2):
            name = "utf-16-le"
        elif len(data) >= 4 and data[0::2].count(0) > 0.9 * (len(data) // 2):
            name = "utf-16-be"
    try:
        text = body.decode(name)
    except UnicodeDecodeError:
        raise InputError(f"not a text file (cannot decode as {name}); expected an edge list "
                         "'n m' then 'i j w' lines", path=path) from None
    if "\x00" in text:
        raise InputError("not a text file (contains NUL bytes); expected an edge list", path=path)
    return text


def _parse_vertex(token: str, n: int, path: Path, line: int) -> int:
    try:
        v = int(token)
    except ValueError:
        raise InputError(f"vertex {token!r} is not a whole number", path=path, line=line) from None
    if not 1 <= v <= n:
        raise InputError(f"vertex {v} is out of range 1..{n}", path=path, line=line)
    return v - 1


def _read_edge_list(path: Path) -> SignedGraph:
    text = _decode(_read_bytes(path), path)
    header = None
    n = m = 0
    rows: list[int] = []
    cols: list[int] = []
    weights: list[float] = []
    header_line = 0
    for number, raw in enumerate(text.splitlines(), start=1):
        content = raw.split("#", 1)[0].strip()
        if not content:
            continue
        tokens = content.split()
        if header is None:
            header_line = number
            if len(tokens) != 2:
                raise InputError(f"expected a header 'n m' (vertex and edge counts), got {content[:40]!r}",
                                 path=path, line=number)
            try:
                n, m = int(tokens[0]), int(tokens[1])
            except ValueError:
                raise InputError(f"header must be two whole numbers 'n m', got {content[:40]!r}",
                                 path=path, line=number) from None
            if n < 0 or m < 0:
                raise InputError(f"header counts must be >= 0, got {content[:40]!r}", path=path,
                                 line=number)
            header = (n, m)
            continue
        if len(tokens) not in (2, 3):
            raise InputError(f"expected an edge 'i j w', got {content[:40]!r}", path=path, line=number)
        i = _parse_vertex(tokens[0], n, path, number)
        j = _parse_vertex(tokens[1], n, path, number)
        if i == j:
            raise InputError(f"self-loop on vertex {i + 1}; self-loops never count in a cut",
                             path=path, line=number)
        w = 1.0
        if len(tokens) == 3:
            try:
                w = float(tokens[2])
            except ValueError:
                raise InputError(f"weight {tokens[2]!r} is not a number", path=path,
                                 line=number) from None
            if not math.isfinite(w):
                raise InputError(f"weight {tokens[2]!r} is not finite", path=path, line=number)
        rows.append(i)
        cols.append(j)
        weights.append(w)
        if len(rows) > m:
            raise InputError(f"more edges than the {m} the header announces", path=path, line=number)
    if header is None:
        raise InputError("empty graph file: expected a header 'n m' and edge lines", path=path)
    if len(rows) != m:
        raise InputError(f"the header announces {m} edges but the file has {len(rows)}", path=path,
                         line=header_line)
    return graph_from_edges(n, np.array(rows, dtype=np.int64), np.array(cols, dtype=np.int64),
                            np.array(weights, dtype=np.float64))


def _read_graphml(path: Path) -> SignedGraph:
    import networkx as nx  # noqa: PLC0415

    if not path.exists():
        raise InputError("no such file", path=path)
    try:
        g = nx.read_graphml(path)
    except Exception as err:  # networkx and the XML parser raise many kinds
        first = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise InputError(f"not a readable GraphML file: {first}", path=path) from None
    if g.is_multigraph():
        raise InputError("GraphML holds parallel edges (a multigraph); merge them first", path=path)
    if g.is_directed():
        raise InputError("GraphML graph is directed; max-cut needs an undirected graph", path=path)
    for u, v, data in g.edges(data=True):
        w = data.get("weight", 1.0)
        try:
            w = float(w)
        except (TypeError, ValueError):
            raise InputError(f"edge ({u}, {v}) has a weight {w!r} that is not a number",
                             path=path) from None
        if not math.isfinite(w):
            raise InputError(f"edge ({u}, {v}) has a weight {w!r} that is not finite", path=path)
        if u == v:
            raise InputError(f"self-loop on node {u!r}; self-loops never count in a cut", path=path)
        data["weight"] = w
    return as_signed_graph(g)


def read_graph(path) -> SignedGraph:
    """Read a graph file: GraphML when the suffix is ``.graphml``, else an edge list.

    Parameters
    ----------
    path : str or os.PathLike

    Returns
    -------
    SignedGraph
        Vertices are numbered from 0 (edge-list vertex ``i`` becomes ``i - 1``; GraphML
        nodes in file order). Duplicate edges are summed.

    Raises
    ------
    segcut.errors.InputError
        One line naming the file, the line (edge lists) and the problem: missing or
        garbled header, edge count differing from the header, vertex out of range,
        self-loop, non-numeric or non-finite weight, binary or empty file.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (folder / "triangle.txt").write_text("3 3\\n1 2\\n2 3 2.5\\n1 3 -1\\n")
    >>> read_graph(folder / "triangle.txt")
    SignedGraph(n_vertices=3, n_edges=3, total_weight=2.5)
    """
    path = Path(path)
    if _is_graphml(path):
        return _read_graphml(path)
    return _read_edge_list(path)


def _format_weight(w: float) -> str:
    if w == int(w) and abs(w) < 2 ** 53:
        return str(int(w))
    return repr(float(w))


def _write_atomic(path: Path, text: str) -> None:
    from ..files import write_text_atomic  # the one atomic-write helper of the package

    write_text_atomic(path, text)


def write_graph(graph, path) -> None:
    """Write a graph as an edge list (``n m`` then ``i j w``, 1-based) or as GraphML.

    GraphML is chosen by the suffix ``.graphml``. Whole-number weights are written
    without a decimal point; others with full precision, so reading the file back
    gives the same graph.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> from segcut.graph import graph_from_edges
    >>> folder = pathlib.Path(tempfile.mkdtemp())
    >>> write_graph(graph_from_edges(3, [0, 1], [1, 2], [1.0, -0.5]), folder / "g.txt")
    >>> print((folder / "g.txt").read_text(), end="")
    3 2
    1 2 1
    2 3 -0.5
    """
    graph = as_signed_graph(graph)
    path = Path(path)
    i, j, w = graph.edges()
    if _is_graphml(path):
        import networkx as nx  # noqa: PLC0415

        g = nx.Graph()
        g.add_nodes_from(range(graph.n_vertices))
        g.add_weighted_edges_from(zip(i.tolist(), j.tolist(), w.tolist()))
        text = "\n".join(nx.generate_graphml(g)) + "\n"
    else:
        lines = [f"{graph.n_vertices} {graph.n_edges}"]
        lines.extend(f"{a + 1} {b + 1} {_format_weight(c)}" for a, b, c in zip(i.tolist(), j.tolist(),
                                                                                 w.tolist()))
        text = "\n".join(lines) + "\n"
    _write_atomic(path, text)


def write_sides(sides, path) -> None:
    """Write one side label per line: ``1`` for side +1, ``0`` for side -1.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "sides.txt"
    >>> write_sides([1, -1, 1], path)
    >>> path.read_text().split()
    ['1', '0', '1']
    """
    x = np.asarray(sides)
    if x.ndim != 1 or not np.all(np.isin(x, (-1, 1))):
        raise ValueError("sides must be a 1-D array of -1/+1")
    _write_atomic(Path(path), "".join("1\n" if s == 1 else "0\n" for s in x.tolist()))


def read_sides(path, *, n_vertices: int | None = None) -> np.ndarray:
    """Read a side-label file (one ``0`` or ``1`` per line) as an int8 array of -1/+1.

    Raises
    ------
    segcut.errors.InputError
        For a label other than 0/1, or a count differing from ``n_vertices``.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> path = pathlib.Path(tempfile.mkdtemp()) / "sides.txt"
    >>> _ = path.write_text("1\\n0\\n")
    >>> read_sides(path)
    array([ 1, -1], dtype=int8)
    """
    path = Path(path)
    text = _decode(_read_bytes(path), path)
    labels = []
    for number, raw in enumerate(text.splitlines(), start=1):
        content = raw.split("#", 1)[0].strip()
        if not content:
            continue
        if content not in ("0", "1"):
            raise InputError(f"expected a side label 0 or 1, got {content[:20]!r}", path=path,
                             line=number)
        labels.append(1 if content == "1" else -1)
    x = np.array(labels, dtype=np.int8)
    if n_vertices is not None and x.shape[0] != n_vertices:
        raise InputError(f"{x.shape[0]} side labels for a graph of {n_vertices} vertices", path=path)
    return x

