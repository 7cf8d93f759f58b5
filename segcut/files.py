"""Files written safely: atomic replacement, whole appended lines, JSON lines.

The one place for these mechanics: images and masks (:mod:`segcut.io`), overlays
(:mod:`segcut.drawing`), run folders (:mod:`segcut.batch`) and graph files
(:mod:`segcut.maxcut.formats`) all write through :func:`atomic_path`, and every
JSON output is cleaned by :func:`json_ready`.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import secrets
from pathlib import Path
from typing import Iterator

from .errors import InputError, SegcutError

__all__ = [
    "atomic_path",
    "write_bytes_atomic",
    "write_text_atomic",
    "append_line",
    "json_ready",
    "json_line",
    "append_json_line",
    "write_json_lines",
    "read_json_lines",
]


@contextlib.contextmanager
def atomic_path(path) -> Iterator[Path]:
    """Write a file through a temporary name, then move it into place in one step.

    Yields a temporary path in the target's folder (created if needed; same suffix as
    the target, so writers that look at the suffix still work). When the block ends
    normally the file is flushed to disk and renamed over ``path`` with
    :func:`os.replace`; when the block raises, the temporary file is removed, the
    target is left as it was and the exception propagates. Failures of the file system
    itself (folder not writable, disk full while flushing) raise
    :class:`~segcut.errors.SegcutError` naming the target, in one line.

    Parameters
    ----------
    path : str or os.PathLike
        The final file.

    Examples
    --------
    >>> import tempfile, os
    >>> target = os.path.join(tempfile.mkdtemp(), "notes.txt")
    >>> with atomic_path(target) as tmp:
    ...     _ = tmp.write_text("done")
    >>> Path(target).read_text(), os.listdir(os.path.dirname(target))
    ('done', ['notes.txt'])
    """
    target = Path(path)
    folder = target.parent
    stem = target.stem[:80]  # long names stay within the file system's name limit
    tmp = folder / f".{stem}.{os.getpid()}-{secrets.token_hex(4)}.tmp{target.suffix}"
    with _cannot_write(target):
        folder.mkdir(parents=True, exist_ok=True)
        # created empty with the usual permissions (0o666 minus the umask), exclusively
        os.close(os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666))
    try:
        yield tmp
        with _cannot_write(target):
            fd = os.open(tmp, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
            os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise


@contextlib.contextmanager
def _cannot_write(path):
    """Turn an operating-system failure while writing ``path`` into a one-line error."""
    try:
        yield
    except SegcutError:
        raise
    except OSError as err:
        raise SegcutError(f"cannot write the file ({err.strerror or _one_line(err)})",
                          path=path) from None


def write_bytes_atomic(path, data: bytes) -> None:
    """Replace ``path`` with ``data`` atomically (see :func:`atomic_path`)."""
    with atomic_path(path) as tmp, _cannot_write(path):
        with open(tmp, "wb") as f:
            f.write(data)


def write_text_atomic(path, text: str) -> None:
    """Replace ``path`` with ``text`` (UTF-8) atomically (see :func:`atomic_path`).

    Examples
    --------
    >>> import tempfile, os
    >>> target = os.path.join(tempfile.mkdtemp(), "run.toml")
    >>> write_text_atomic(target, "seed = 0\\n")
    >>> Path(target).read_text()
    'seed = 0\\n'
    """
    write_bytes_atomic(path, str(text).encode("utf-8"))


def append_line(path, line: str) -> None:
    """Append one whole line to a text file, safely shared between processes.

    The line and its newline go out in a single ``os.write`` on a file opened with
    ``O_APPEND`` and are flushed to disk, so concurrent writers never interleave
    within a line and a crash leaves at most one incomplete last line (which
    :func:`read_json_lines` ignores).

    Parameters
    ----------
    path : str or os.PathLike
        The file (created if missing, with its folder).
    line : str
        The text, without a line break.

    Raises
    ------
    ValueError
        The text contains a line break.
    """
    text = str(line)
    if "\n" in text or "\r" in text:
        raise ValueError("append_line writes one line; the text contains a line break")
    data = (text + "\n").encode("utf-8")
    target = Path(path)
    with _cannot_write(target):
        target.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(target, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o666)
        try:
            written = os.write(fd, data)
            while written < len(data):  # regular files take it in one go; be safe anyway
                written += os.write(fd, data[written:])
            os.fsync(fd)
        finally:
            os.close(fd)


def json_ready(value):
    """A copy of ``value`` made of plain JSON types: the one cleaner of records and outputs.

    numpy scalars and arrays become numbers and lists, paths become strings, tuples
    become lists, and NaN or infinite floats become ``None`` (JSON has no NaN).

    Examples
    --------
    >>> import numpy as np
    >>> json_ready({"a": np.float32(1.5), "b": (np.int64(2), float("inf")), 3: np.bool_(True)})
    {'a': 1.5, 'b': [2, None], '3': True}
    """
    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if hasattr(value, "tolist") and hasattr(value, "dtype"):  # numpy scalar or array
        return json_ready(value.tolist())
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    return value


def json_line(record: dict, *, sort_keys: bool = False) -> str:
    """``record`` as one line of JSON text (no line break), cleaned by :func:`json_ready`.

    Text is kept as UTF-8 characters; a string that cannot be written as UTF-8 (a
    file name that is not valid UTF-8) makes the whole line ASCII with escapes.

    Examples
    --------
    >>> json_line({"b": 1, "a": "é"}, sort_keys=True)
    '{"a": "é", "b": 1}'
    """
    if not isinstance(record, dict):
        raise TypeError(f"record must be a dict, got {type(record).__name__}")
    clean = json_ready(record)
    text = json.dumps(clean, ensure_ascii=False, allow_nan=False, sort_keys=sort_keys)
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        text = json.dumps(clean, allow_nan=False, sort_keys=sort_keys)
    return text


def append_json_line(path, record: dict, *, sort_keys: bool = False) -> None:
    """Append ``record`` as one line of JSON (see :func:`append_line` and :func:`json_line`).

    Keys keep their order unless ``sort_keys``.

    Examples
    --------
    >>> import tempfile, os, numpy as np
    >>> path = os.path.join(tempfile.mkdtemp(), "records.jsonl")
    >>> append_json_line(path, {"input": "a.png", "value": np.float64(2.5), "gap": float("nan")})
    >>> Path(path).read_text()
    '{"input": "a.png", "value": 2.5, "gap": null}\\n'
    """
    append_line(path, json_line(record, sort_keys=sort_keys))


def write_json_lines(path, records, *, sort_keys: bool = False) -> None:
    """Replace ``path`` with one JSON line per record, atomically (see :func:`atomic_path`).

    Examples
    --------
    >>> import tempfile, os
    >>> path = os.path.join(tempfile.mkdtemp(), "records.jsonl")
    >>> write_json_lines(path, [{"input": "a.png"}, {"input": "b.png"}])
    >>> read_json_lines(path)
    [{'input': 'a.png'}, {'input': 'b.png'}]
    """
    text = "".join(json_line(r, sort_keys=sort_keys) + "\n" for r in records)
    write_bytes_atomic(path, text.encode("utf-8"))


def read_json_lines(path, *, skip_invalid: bool = False) -> list:
    """Read a JSON-lines file written by :func:`append_json_line` or :func:`write_json_lines`.

    An incomplete last line (no line break: a writer was interrupted) is ignored
    unless it is whole JSON by itself; blank lines are skipped. A missing file gives an
    empty list.

    Parameters
    ----------
    path : str or os.PathLike
    skip_invalid : bool
        Pass over lines that are not valid JSON instead of raising.

    Raises
    ------
    InputError
        A complete line is not valid JSON (the message names the line), unless
        ``skip_invalid``.

    Examples
    --------
    >>> import tempfile, os
    >>> path = os.path.join(tempfile.mkdtemp(), "records.jsonl")
    >>> append_json_line(path, {"input": "a.png"})
    >>> with open(path, "a") as f:
    ...     _ = f.write('{"input": "b.p')
    >>> read_json_lines(path)
    [{'input': 'a.png'}]
    """
    try:
        data = Path(path).read_bytes()
    except FileNotFoundError:
        return []
    except OSError as err:
        raise InputError(f"cannot read the file ({err.strerror or err})", path=path) from None
    lines = data.split(b"\n")
    records = []
    last = len(lines)
    for number, raw in enumerate(lines, start=1):
        if not raw.strip():
            continue
        try:
            records.append(json.loads(raw.decode("utf-8")))
        except (ValueError, UnicodeDecodeError) as err:
            if skip_invalid or number == last:  # the last piece may be torn
                continue
            raise InputError(f"not a valid JSON line ({_one_line(err)})", path=path,
                             line=number) from None
    return records


def _one_line(err) -> str:
    text = " ".join(str(err).split())
    return text or type(err).__name__
