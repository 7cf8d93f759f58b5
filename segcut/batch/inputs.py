"""Finding the inputs of a run, naming their outputs, hashing them and seeding them."""

from __future__ import annotations

import fnmatch
import hashlib
import os
from collections import defaultdict
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Sequence

from ..errors import InputError

__all__ = ["InputItem", "InputListing", "find_inputs", "hash_file", "image_seed",
           "index_seed_folder"]

_HASH_CHUNK = 1 << 20


@dataclass(frozen=True)
class InputItem:
    """One image file found for a run.

    Attributes
    ----------
    path : str
        The file, as found (absolute or relative to the working folder).
    input : str
        Its name inside the run, unique among the run's inputs: the path relative to
        the folder it was found in, with ``/`` separators (the file name when the file
        was given directly). When two given paths hold the same relative name, each of
        those inputs is prefixed with its folder's name (``day1/a.png``); see
        :func:`find_inputs`.
    output : str
        The name of its outputs, without suffix (``masks/<output>.png``): ``input``
        without its suffix, or ``input`` itself when another input has the same name
        up to the suffix (``a.png`` and ``a.jpg`` write ``masks/a.png.png`` and
        ``masks/a.jpg.png``).
    relative : str
        The path relative to the folder it was found in, without the suffix (used to
        match seed files).
    """

    path: str
    input: str
    output: str = ""
    relative: str = field(default="", compare=False)

    def __post_init__(self):
        if not self.output:
            object.__setattr__(self, "output", _without_suffix(self.input))
        if not self.relative:
            object.__setattr__(self, "relative", _without_suffix(self.input))

    @property
    def stem(self) -> str:
        """The name of its outputs (same as ``output``)."""
        return self.output


@dataclass(frozen=True)
class InputListing:
    """The result of :func:`find_inputs`.

    Attributes
    ----------
    items : tuple of InputItem
        The images to process, sorted by the order of the given paths, then by name.
    skipped : tuple of (str, str)
        ``(path, reason)`` for each file that was found but will not be processed
        (unknown type, or the same file given twice).
    missing : tuple of str
        Given paths that do not exist (only with ``missing_ok=True``).
    """

    items: tuple
    skipped: tuple
    missing: tuple = ()


def _without_suffix(name: str) -> str:
    head, _, base = name.rpartition("/")
    stem = base.rsplit(".", 1)[0] if "." in base.lstrip(".") else base
    return f"{head}/{stem}" if head else stem


def _image_suffixes() -> frozenset:
    from ..io import IMAGE_SUFFIXES

    return frozenset(s.lower() for s in IMAGE_SUFFIXES)


def _matches(relative: str, patterns: Sequence[str]) -> bool:
    name = relative.rpartition("/")[2]
    return any(fnmatch.fnmatchcase(relative, p) or fnmatch.fnmatchcase(name, p) for p in patterns)


def _walk(given: str, ignored: set) -> list:
    """``(relative name, path)`` of every visible file under a folder, and of every Zarr
    store (a folder read as one image, not searched), sorted."""
    from ..io_zarr import is_zarr_store

    found = []
    for folder, dirs, files in os.walk(given):
        dirs[:] = sorted(d for d in dirs if not d.startswith(".")
                         and os.path.realpath(os.path.join(folder, d)) not in ignored)
        rel_folder = os.path.relpath(folder, given)
        stores = [d for d in dirs if is_zarr_store(os.path.join(folder, d))]
        dirs[:] = [d for d in dirs if d not in stores]
        for name in stores + files:
            if name.startswith("."):
                continue
            rel = name if rel_folder == "." else os.path.join(rel_folder, name)
            found.append((rel.replace(os.sep, "/"), os.path.join(folder, name)))
    return sorted(found)


def _label(given: str, is_dir: bool) -> str:
    """The prefix of a given path's inputs when their names clash with another path's."""
    full = os.path.abspath(given)
    name = os.path.basename(full if is_dir else os.path.dirname(full))
    return name or "root"


def _unique(names: list, renamed) -> list:
    """Rename clashing entries with ``renamed(name, k)``; ``~2``, ``~3``... if still clashing."""
    groups = defaultdict(list)
    for k, name in enumerate(names):
        groups[name].append(k)
    out = list(names)
    for name, members in groups.items():
        if len(members) > 1:
            for k in members:
                out[k] = renamed(name, k)
    seen: dict = {}
    for k, name in enumerate(out):
        if name in seen:
            seen[name] += 1
            out[k] = f"{name}~{seen[name]}"
        else:
            seen[name] = 1
    return out


def find_inputs(paths: Iterable, *, include: Sequence[str] = (), exclude: Sequence[str] = (),
                ignore: Iterable = (), missing_ok: bool = False) -> InputListing:
    """List the image files under ``paths`` (files and folders, searched recursively).

    Every image found becomes an input with its own name and its own outputs:

    - its name is its path relative to the given folder (the file name for a file
      given directly). When several given paths hold the same name (two folders
      each with ``a.png``), each such input is named ``<folder name>/<name>``
      (``day1/a.png``, ``day2/a.png``; for a file given directly, the name of the
      folder it is in); given folders that share a name too are told apart as
      ``in~1``, ``in~2``... in the order given (and any name still taken gets
      ``~2``, ``~3``...);
    - its outputs are named by its name without the suffix, unless another input
      has the same name up to the suffix (``a.png`` and ``a.jpg``): then both keep
      their suffix (``masks/a.png.png``, ``masks/a.jpg.png``).

    The same rules on the same paths always give the same names.

    Parameters
    ----------
    paths : iterable of str or os.PathLike
        Files and folders. Hidden files and folders (names starting with ``.``) inside
        a folder are passed over.
    include, exclude : sequence of str
        Glob patterns (``fnmatch`` syntax, case-sensitive, ``*`` also crosses ``/``)
        matched against the path relative to the given folder and against the file
        name. With ``include``, only matching files are taken; files matching
        ``exclude`` are passed over. Files given directly are matched the same way.
    ignore : iterable of str or os.PathLike
        Folders never to descend into (the run folder itself, when it lies inside an
        input folder).
    missing_ok : bool
        List paths that do not exist in ``missing`` instead of raising.

    Returns
    -------
    InputListing

    Raises
    ------
    InputError
        When a path does not exist (unless ``missing_ok``).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     root = pathlib.Path(d)
    ...     (root / "sub").mkdir()
    ...     for name in ["b.png", "b.jpg", "sub/a.JPG", "notes.txt"]:
    ...         _ = (root / name).write_bytes(b"")
    ...     listing = find_inputs([root])
    >>> [(item.input, item.output) for item in listing.items]
    [('b.jpg', 'b.jpg'), ('b.png', 'b.png'), ('sub/a.JPG', 'sub/a')]
    >>> [reason for _, reason in listing.skipped]
    ['not a known image type (.txt)']
    """
    from ..io_zarr import is_zarr_store

    suffixes = _image_suffixes()
    ignored = {os.path.realpath(p) for p in ignore}
    found: list = []  # (given index, label, relative name, path)
    skipped: list = []
    missing: list = []
    seen_files: dict = {}
    for index, given in enumerate(paths):
        given = os.fspath(given)
        if is_zarr_store(given):  # a Zarr store given directly: one image
            entries, label = [(os.path.basename(os.path.normpath(given)), given)], \
                _label(given, False)
        elif os.path.isdir(given):
            entries, label = _walk(given, ignored), _label(given, True)
        elif os.path.isfile(given):
            entries, label = [(os.path.basename(given), given)], _label(given, False)
        elif missing_ok:
            missing.append(given)
            continue
        else:
            raise InputError("no such file or folder", path=given)
        for rel, path in entries:
            if (include and not _matches(rel, include)) or (exclude and _matches(rel, exclude)):
                continue
            suffix = os.path.splitext(path)[1].lower()
            if suffix not in suffixes and not is_zarr_store(path):
                skipped.append((path, f"not a known image type ({suffix or 'no suffix'})"))
                continue
            real = os.path.realpath(path)
            if real in seen_files:
                skipped.append((path, f"the same file as {seen_files[real]}, given twice"))
                continue
            seen_files[real] = path
            found.append((index, label, rel, path))
    given_labels = dict((index, label) for index, label, _, _ in found)
    unique_labels = dict(zip(given_labels, _unique(list(given_labels.values()),
                                                   lambda name, k: f"{name}~{k + 1}")))
    labels = [unique_labels[index] for index, _, _, _ in found]
    names = _unique([rel for _, _, rel, _ in found], lambda name, k: f"{labels[k]}/{name}")
    outputs = _unique([_without_suffix(n) for n in names], lambda name, k: names[k])
    items = [InputItem(path=path, input=name, output=output, relative=_without_suffix(rel))
             for (_, _, rel, path), name, output in zip(found, names, outputs)]
    return InputListing(items=tuple(items), skipped=tuple(skipped), missing=tuple(missing))


def hash_file(path) -> str:
    """SHA-256 of a file's bytes, read in 1 MiB pieces, as ``"sha256:<hex>"``.

    A folder (a Zarr store) is hashed as the sequence of its files in sorted order of
    their relative paths, each as its path, its length and its bytes.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = pathlib.Path(d) / "x"
    ...     _ = p.write_bytes(b"abc")
    ...     hash_file(p)[:23]
    'sha256:ba7816bf8f01cfea'
    """
    digest = hashlib.sha256()
    if os.path.isdir(path):
        for rel, full in _walk_all(path):
            digest.update(f"{rel}\0{os.path.getsize(full)}\0".encode())
            _hash_into(digest, full)
    else:
        _hash_into(digest, path)
    return "sha256:" + digest.hexdigest()


def _hash_into(digest, path) -> None:
    with open(path, "rb") as fh:
        while chunk := fh.read(_HASH_CHUNK):
            digest.update(chunk)


def _walk_all(folder) -> list:
    """``(relative path with / separators, path)`` of every file under ``folder``, sorted."""
    found = []
    for here, dirs, files in os.walk(folder):
        dirs.sort()
        for name in files:
            full = os.path.join(here, name)
            found.append((os.path.relpath(full, folder).replace(os.sep, "/"), full))
    return sorted(found)


def image_seed(seed: int, input_hash: str) -> int:
    """The random seed of one image: a 63-bit number from the run seed and its content hash.

    It depends only on the two arguments, never on the order in which workers take
    images, so every executor gives the same result.

    Examples
    --------
    >>> image_seed(0, "sha256:00") == image_seed(0, "sha256:00")
    True
    >>> image_seed(0, "sha256:00") != image_seed(1, "sha256:00")
    True
    """
    digest = hashlib.sha256(f"segcut-image-seed:{int(seed)}:{input_hash}".encode()).digest()
    return int.from_bytes(digest[:8], "big") >> 1


def index_seed_folder(folder: Path) -> dict:
    """``{relative stem: path}`` and ``{file stem: path}`` of the images in a seed folder."""
    listing = find_inputs([folder])
    index: dict = {}
    for item in listing.items:
        index.setdefault(item.relative, item.path)
    for item in listing.items:
        index.setdefault(item.relative.rpartition("/")[2], item.path)
    return index
