"""The files of a run folder that describe it: records.jsonl, summary.csv, run.toml.

``records.jsonl`` only ever grows by whole lines written with one ``write`` call
(:func:`segcut.files.append_json_line`); a torn last line is ignored when the file is
read, and the file is compacted (one line per input, rewritten atomically) at the
start and at the end of every run. ``summary.csv`` has the columns of
:data:`segcut.columns.OUTPUT_COLUMNS`.
"""

from __future__ import annotations

import contextlib
import csv
import functools
import io as _stdio
import os
import platform
import re
from pathlib import Path

from .. import columns
from ..errors import ConfigError, SegcutError
from ..files import append_json_line, read_json_lines, write_bytes_atomic, write_json_lines

__all__ = ["RECORDS_NAME", "SUMMARY_NAME", "RUN_CONFIG_NAME", "REPORT_NAME", "MASKS_DIR",
           "OVERLAYS_DIR", "CONFIDENCE_DIR", "load_records", "compact_records", "append_record", "summary_rows",
           "write_summary", "check_run_folder", "remove_stale_temporaries", "versions"]

RECORDS_NAME = "records.jsonl"
SUMMARY_NAME = "summary.csv"
RUN_CONFIG_NAME = "run.toml"
REPORT_NAME = "report.html"
MASKS_DIR = "masks"
OVERLAYS_DIR = "overlays"
CONFIDENCE_DIR = "confidence"


def one_line(text) -> str:
    return " ".join(str(text).split())


@functools.lru_cache(maxsize=1)
def _versions_cached() -> tuple:
    from importlib import metadata

    out = {"python": platform.python_version()}
    for name in ("segcut", "numpy", "scipy", "scikit-image", "numba", "pillow", "tifffile"):
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return tuple(out.items())


def versions() -> dict:
    """Versions of Python and the packages a result depends on."""
    return dict(_versions_cached())


def load_records(out_dir) -> dict:
    """Read ``records.jsonl`` of a run folder: ``{input: record}``, the last line per input.

    Lines that are not whole JSON objects (a torn last line after a kill) are ignored.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> with tempfile.TemporaryDirectory() as d:
    ...     _ = (pathlib.Path(d) / "records.jsonl").write_text(
    ...         '{"input": "a.png", "status": "failed"}\\n'
    ...         '{"input": "a.png", "status": "ok"}\\n{"input": "b.p')
    ...     load_records(d)
    {'a.png': {'input': 'a.png', 'status': 'ok'}}
    """
    records: dict = {}
    for record in read_json_lines(Path(out_dir) / RECORDS_NAME, skip_invalid=True):
        if isinstance(record, dict) and isinstance(record.get("input"), str):
            records[record["input"]] = record
    return records


def compact_records(out_dir: Path, records: dict) -> None:
    """Rewrite ``records.jsonl`` with one line per input, sorted by input (atomically)."""
    write_json_lines(Path(out_dir) / RECORDS_NAME, [records[k] for k in sorted(records)],
                     sort_keys=True)


def append_record(out_dir: Path, record: dict) -> None:
    """One whole line per record (a single write on an O_APPEND file, then fsync)."""
    append_json_line(Path(out_dir) / RECORDS_NAME, record, sort_keys=True)


# Temporary names of segcut.files.atomic_path: ".<stem>.<pid>-<8 hex>.tmp<suffix>".
_TEMP_NAME = re.compile(r"^\..*\.\d+-[0-9a-f]{8}\.tmp(\.[A-Za-z0-9]+)?$")


def remove_stale_temporaries(out_dir: Path) -> None:
    """Delete temporary files a killed run left behind (they were never renamed into place)."""
    folders = [(out_dir, False), (out_dir / MASKS_DIR, True), (out_dir / OVERLAYS_DIR, True),
               (out_dir / CONFIDENCE_DIR, True)]
    for folder, recursive in folders:
        if not folder.is_dir():
            continue
        walker = os.walk(folder) if recursive else [(str(folder), [], os.listdir(folder))]
        for root, _, files in walker:
            for name in files:
                if _TEMP_NAME.match(name):
                    with contextlib.suppress(OSError):
                        os.unlink(os.path.join(root, name))


def _csv_value(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, (list, tuple)):
        return "; ".join(one_line(v) for v in value)
    return one_line(value)


def summary_rows(records: dict) -> list[dict]:
    """One flat row per record, sorted by input, keyed by the output columns
    (:data:`segcut.columns.OUTPUT_COLUMNS`, read when called)."""
    return [{c.key: columns.column_value(c, records[key]) for c in columns.OUTPUT_COLUMNS}
            for key in sorted(records)]


def write_summary(out_dir: Path, records: dict) -> Path:
    """Write ``summary.csv`` (atomically); return its path."""
    buffer = _stdio.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    keys = [c.key for c in columns.OUTPUT_COLUMNS]
    writer.writerow(keys)
    for row in summary_rows(records):
        writer.writerow([_csv_value(row[k]) for k in keys])
    path = Path(out_dir) / SUMMARY_NAME
    write_bytes_atomic(path, buffer.getvalue().encode("utf-8", errors="backslashreplace"))
    return path


def check_run_folder(out_dir: Path, config, config_hash: str, records: dict, *,
                     force: bool = False) -> None:
    """Refuse a folder made with another configuration; write run.toml for a new one.

    With ``force``, a folder of another configuration is taken over: its records are
    emptied (the files they name are left; this run rewrites the ones it makes) and
    its ``run.toml`` replaced.
    """
    from ..config import load_config

    run_toml = out_dir / RUN_CONFIG_NAME
    found = set()
    if run_toml.is_file():
        try:
            found.add(str(load_config(run_toml).config_hash()))
        except SegcutError as exc:
            if not force:
                raise ConfigError(f"its {RUN_CONFIG_NAME} cannot be read ({exc.message}); "
                                  "choose another output folder, or give --force to start "
                                  "it again", path=out_dir) from None
            found.add("unreadable")
    found.update(r.get("config_hash") for r in records.values() if r.get("config_hash"))
    found.discard(config_hash)
    if found and not force:
        other = sorted(found)[0]
        raise ConfigError(
            f"this run folder holds results of a different configuration (config hash "
            f"{other[:12]}, this run {config_hash[:12]}); write to another output folder, "
            f"or give --force to start it again with this one", path=out_dir)
    if found:  # forced: start the folder again
        records.clear()
        compact_records(out_dir, records)
    if found or not run_toml.is_file():
        header = "".join(f"# {name} {version}\n" for name, version in versions().items())
        text = (f"# segcut run configuration (config hash {config_hash})\n{header}\n"
                + config.to_toml())
        write_bytes_atomic(run_toml, text.encode("utf-8"))
