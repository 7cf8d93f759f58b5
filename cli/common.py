"""What the commands share: exit codes, the errors they raise, messages, tables and
matching files of several folders by their path inside them.

Exit codes (defined here only): 0 all done; 1 some inputs failed (the rest
finished); 2 usage error (a foreseeable mistake in the command: a missing input, a
bad option or config value, a refused output folder); 3 unexpected error (one line
on the terminal, the traceback in a log file); 130 interrupted.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

EXIT_OK = 0
EXIT_FAILED = 1
EXIT_USAGE = 2
EXIT_UNEXPECTED = 3
EXIT_INTERRUPTED = 130


class CommandError(Exception):
    """A command cannot go on: one line for the terminal and an exit code.

    ``details`` are added to the JSON object printed with ``--json``.
    """

    exit_code = EXIT_FAILED

    def __init__(self, message: str, *, path=None, details: dict | None = None):
        where = f"{path}: " if path is not None else ""
        super().__init__(where + " ".join(str(message).split()))
        self.details = dict(details or {})


class UsageError(CommandError):
    """A foreseeable mistake in the command line (exit code 2)."""

    exit_code = EXIT_USAGE


class NothingDone(CommandError):
    """Nothing could be done with the inputs given (exit code 1)."""

    exit_code = EXIT_FAILED


def plural(n: int, word: str, words: str | None = None) -> str:
    """``"1 image"``, ``"2 images"``.

    Examples
    --------
    >>> plural(1, "image"), plural(0, "file"), plural(3, "mask", "masks")
    ('1 image', '0 files', '3 masks')
    """
    return f"{n} {word}" if n == 1 else f"{n} {words or word + 's'}"


def err(stream, path, message: str) -> None:
    """Write ``segcut: <path>: <message>`` (or ``segcut: <message>``) as one line."""
    where = f"{path}: " if path is not None else ""
    stream.write(f"segcut: {where}{message}\n")


def write_json(stream, payload: dict) -> None:
    """One JSON object on one line of its own (non-finite numbers become null)."""
    from segcut.files import json_ready

    stream.write(json.dumps(json_ready(payload), indent=2, allow_nan=False,
                            ensure_ascii=False) + "\n")


def check_exists(path: Path) -> None:
    """A usage error when ``path`` is neither a file nor a folder."""
    if not Path(path).exists():
        raise UsageError("no such file or folder", path=path)


def size_text(shape) -> str:
    """``"W x H"`` of a 2-D shape; the tuple of others."""
    shape = tuple(shape)
    return " x ".join(str(s) for s in shape[::-1]) if len(shape) == 2 else str(shape)


def names_text(names: list, limit: int = 50) -> str:
    """Up to ``limit`` names, then how many more."""
    shown = ", ".join(names[:limit])
    more = len(names) - limit
    return shown + (f" and {more} more (all are listed with --json)" if more > 0 else "")


def table(header: list, body: list, *, right: set) -> str:
    """A plain text table with a rule under the header; columns in ``right`` right-aligned."""
    widths = [max(len(str(r[i])) for r in [header] + body) for i in range(len(header))]
    lines = []
    for k, r in enumerate([header] + body):
        cells = [str(c).rjust(w) if i in right else str(c).ljust(w)
                 for i, (c, w) in enumerate(zip(r, widths))]
        lines.append("  ".join(cells).rstrip())
        if k == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


# --- matching files by their path inside the folders given ------------------------------

@dataclass
class FileSet:
    """Image files of one argument (folders searched recursively, or files), keyed.

    The key of a file in a folder is its path inside the folder without the suffix
    (``day1/a``); of a file given directly, its name without the suffix.
    """

    name: str
    files: dict = field(default_factory=dict)       # key -> Path
    duplicates: dict = field(default_factory=dict)  # key -> [Path, ...] (ambiguous)


def _key(relative: str) -> str:
    head, _, base = relative.rpartition("/")
    stem = base.rsplit(".", 1)[0] if "." in base.lstrip(".") else base
    return f"{head}/{stem}" if head else stem


def list_image_files(path: Path) -> list:
    """``(relative path, file)`` of the image files under a folder (recursively, hidden
    files and folders passed over), sorted."""
    from segcut.batch import find_inputs

    return sorted((item.input, Path(item.path)) for item in find_inputs([path]).items)


def is_image_folder(path) -> bool:
    """True for a folder of images; a Zarr store (a folder on disk) is one image."""
    from segcut.io_zarr import is_zarr_store

    path = Path(path)
    return path.is_dir() and not is_zarr_store(path)


def path_groups(paths: list, target_is_folder: bool) -> list:
    """``(set name, [paths])`` of the masks given beside one image or reference: with a
    file, one set per path; with a folder, one set per folder and the loose files
    together (set ``"files"``)."""
    if not target_is_folder:
        return [(str(p), [p]) for p in paths]
    folders = [is_image_folder(p) for p in paths]
    groups = [(str(p), [p]) for p, folder in zip(paths, folders) if folder]
    loose = [p for p, folder in zip(paths, folders) if not folder]
    return groups + ([("files", loose)] if loose else [])


def collect_files(paths, *, name: str) -> FileSet:
    """Key the given files and the image files under the given folders."""
    found = FileSet(name=name)
    for p in paths:
        p = Path(p)
        entries = list_image_files(p) if is_image_folder(p) else [(p.name, p)]
        for relative, f in entries:
            key = _key(relative)
            if key in found.duplicates:
                found.duplicates[key].append(f)
            elif key in found.files:
                found.duplicates[key] = [found.files.pop(key), f]
            else:
                found.files[key] = f
    return found


def _image_suffix_stripped(key: str) -> str | None:
    """``a.png`` -> ``a``: a mask segcut named after an input that kept its suffix."""
    from segcut.io import IMAGE_SUFFIXES

    head, _, base = key.rpartition("/")
    stem, dot, suffix = base.rpartition(".")
    if dot and stem and f".{suffix.lower()}" in IMAGE_SUFFIXES:
        return f"{head}/{stem}" if head else stem
    return None


def match_files(left: dict, right: dict) -> tuple[dict, list, list]:
    """Pair the files of two key -> path maps.

    Keys match exactly first (the same path inside the folders); then a key whose
    last part ends in an image suffix matches without it (``a.png`` -> ``a``); then,
    for what is left, the file name without folders, where that name occurs once on
    each side (never a guess between two candidates).

    Returns
    -------
    matched : dict
        ``{left key: (left path, right path)}``.
    left_only, right_only : list of str
        Keys without a partner, sorted.

    Examples
    --------
    >>> m, a, b = match_files({"d1/x": 1, "d2/x": 2, "d1/y": 3, "z.png": 4},
    ...                       {"d1/x": 5, "x": 6, "y": 7, "z": 8})
    >>> sorted(m.items()), a, b
    ([('d1/x', (1, 5)), ('d1/y', (3, 7)), ('z.png', (4, 8))], ['d2/x'], ['x'])
    """
    matched: dict = {}
    free = dict(right)
    for key in sorted(left):
        for candidate in (key, _image_suffix_stripped(key)):
            if candidate is not None and candidate in free:
                matched[key] = (left[key], free.pop(candidate))
                break
    rest = [k for k in sorted(left) if k not in matched]

    def by_name(keys):
        index: dict = {}
        for k in keys:
            index.setdefault(k.rpartition("/")[2], []).append(k)
        return index

    left_names, right_names = by_name(rest), by_name(free)
    for name, keys in left_names.items():
        partners = right_names.get(name, [])
        if len(keys) == 1 and len(partners) == 1:
            matched[keys[0]] = (left[keys[0]], free.pop(partners[0]))
    left_only = sorted(k for k in left if k not in matched)
    return matched, left_only, sorted(free)


def duplicate_lines(found: FileSet, kind: str) -> list:
    """One message per ambiguous key of ``found``."""
    return [f"{dup[0].parent}: several {kind} files have the stem {key.rpartition('/')[2]!r} "
            f"({', '.join(p.name for p in dup)}); rename all but one"
            for key, dup in sorted(found.duplicates.items())]


def unmatched_entry(set_name: str, kind: str, files: list) -> dict:
    """One group of files without a partner: ``{"set", "kind", "count", "files"}``."""
    return {"set": set_name, "kind": kind, "count": len(files), "files": [str(f) for f in files]}


def unmatched_lines(unmatched: list) -> list:
    """One line per group: set, count, what they lack, and the files."""
    lines = []
    for u in unmatched:
        what, lack = u["kind"].split(" ", 1)
        lines.append(f"{u['set']}: {plural(u['count'], what)} {lack}: "
                     f"{names_text(u['files'])}")
    return lines


def fmt_number(value, digits: int = 3) -> str:
    """A number for a table: ``-`` when missing or NaN, ``inf`` when infinite."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    if math.isinf(value):
        return "inf"
    return f"{value:.{digits}f}"
