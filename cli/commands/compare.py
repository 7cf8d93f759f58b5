"""``segcut compare``: agreement of predicted masks with reference masks.

Predictions and references are files or folders; in folders, files are matched by
stem (the name without its extension), so ``horse007.png`` matches
``horse007.jpg``. Every prediction folder is one prediction set; the sets are shown
side by side, ranked, and the best two are compared image by image.
"""

from __future__ import annotations

import csv
import io
import json
import math
import sys
from dataclasses import dataclass, field
from pathlib import Path

EXIT_OK, EXIT_FAILED = 0, 1

#: Columns of the per-image CSV, after ``set``, ``image``, ``prediction``, ``reference``.
CSV_MEASURES = (
    "iou", "dice", "precision", "recall", "boundary_f", "boundary_precision",
    "boundary_recall", "hausdorff", "assd", "true_positive", "false_positive",
    "false_negative", "n_pixels",
)

# Short column titles of the terminal table.
_TITLES = {
    "iou": "IoU", "dice": "Dice", "precision": "Precision", "recall": "Recall",
    "boundary_f": "Boundary F", "hausdorff": "Hausdorff px", "assd": "ASSD px",
}


# --- matching files by stem (also used by `segcut score`) --------------------------------

@dataclass
class FileSet:
    """Image files of one argument (a folder or a list of files), keyed by stem."""

    name: str
    files: dict = field(default_factory=dict)       # stem -> Path
    duplicates: dict = field(default_factory=dict)  # stem -> [Path, ...] (ambiguous)


def list_image_files(path: Path) -> list:
    """Image files directly inside ``path`` (by suffix), sorted by name."""
    from segcut.errors import InputError
    from segcut.io import is_image_path

    try:
        entries = sorted(p for p in path.iterdir() if p.is_file() and is_image_path(p))
    except OSError as err:
        raise InputError(f"cannot list the folder: {err.strerror or err}", path=path) from None
    return entries


def collect_files(paths, *, name: str) -> FileSet:
    """Key the given files (and the image files of given folders) by stem."""
    found = FileSet(name=name)
    for p in paths:
        p = Path(p)
        for f in (list_image_files(p) if p.is_dir() else [p]):
            if f.stem in found.duplicates:
                found.duplicates[f.stem].append(f)
            elif f.stem in found.files:
                found.duplicates[f.stem] = [found.files.pop(f.stem), f]
            else:
                found.files[f.stem] = f
    return found


def check_exists(path: Path) -> None:
    """One-line InputError when ``path`` is neither a file nor a folder."""
    from segcut.errors import InputError

    if not path.exists():
        raise InputError("no such file or folder", path=path)


def _err(stream, path, message: str) -> None:
    where = f"{path}: " if path is not None else ""
    stream.write(f"segcut: {where}{message}\n")


# --- the command -------------------------------------------------------------------------

def compare(predictions, *, reference, tolerance: float = 2.0, threshold: float | None = None,
            rank_by: str = "iou", seed: int = 0, per_image: bool = False,
            as_json: bool = False, csv_path=None, stdout=None, stderr=None) -> int:
    """Compare prediction masks with reference masks; print a table; return an exit code.

    Parameters
    ----------
    predictions : list of str
        Files or folders. Each folder is one prediction set (named by the path as
        given). With a reference *folder*, the files given directly form one more set
        named ``files``, matched by stem; with a reference *file*, each prediction
        file is its own set compared with that reference, and folders are searched
        for the reference's stem.
    reference : str
        A reference mask file or a folder of them.
    tolerance : float
        Boundary matching tolerance in pixels.
    threshold : float or None
        Foreground is ``value > threshold`` in reference masks (default: see
        :func:`segcut.io.read_mask`).
    rank_by : str
        Measure that ranks the sets.
    seed : int
        Seed of the bootstrap resampling.
    per_image : bool
        Also print one row per image.
    as_json : bool
        Print one JSON object instead of tables.
    csv_path : str or None
        Write one row per (set, image) to this CSV file.

    Returns
    -------
    int
        0 when every matched pair was compared; 1 when some input failed (the others
        were still compared). Unmatched files are listed but do not fail the run.
    """
    from segcut.errors import InputError, SegcutError
    from segcut.io import read_mask, write_text_atomic
    from segcut.scoring import compare_masks, summarize_comparison

    out = sys.stdout if stdout is None else stdout
    err = sys.stderr if stderr is None else stderr

    ref_path = Path(reference)
    check_exists(ref_path)
    pred_paths = [Path(p) for p in predictions]
    for p in pred_paths:
        check_exists(p)

    # pairs[set_name] = {image_id: (pred_path, ref_path)}
    pairs: dict = {}
    notes: list = []      # empty references and the like
    unmatched: list = []  # files without a partner: listed, not fatal
    failed = 0
    if ref_path.is_dir():
        refs = collect_files([ref_path], name="reference")
        groups = [(str(p), [p]) for p in pred_paths if p.is_dir()]
        loose = [p for p in pred_paths if not p.is_dir()]
        if loose:
            groups.append(("files", loose))
    else:
        refs = FileSet(name="reference", files={ref_path.stem: ref_path})
        groups = [(str(p), [p]) for p in pred_paths]
    for stem, paths in sorted(refs.duplicates.items()):
        _err(err, paths[0].parent, f"several reference files have the stem {stem!r} "
             f"({', '.join(p.name for p in paths)}); rename all but one")
        failed += 1
    if not refs.files and not refs.duplicates:
        raise InputError("no reference masks found (looked for "
                         "image files directly inside)", path=ref_path)
    for set_name, paths in groups:
        if set_name in pairs:
            set_name = f"{set_name} ({len(pairs) + 1})"
        found = collect_files(paths, name=set_name)
        for stem, dup in sorted(found.duplicates.items()):
            _err(err, dup[0].parent, f"several prediction files have the stem {stem!r} "
                 f"({', '.join(p.name for p in dup)}); rename all but one")
            failed += 1
        matched = {}
        if not ref_path.is_dir() and not paths[0].is_dir():
            matched[ref_path.stem] = (paths[0], ref_path)  # a file against the one reference
        else:
            orphans = []
            for stem, f in found.files.items():
                if stem in refs.files:
                    matched[stem] = (f, refs.files[stem])
                elif ref_path.is_dir():
                    orphans.append(stem)
            if orphans:
                unmatched.append(f"{set_name}: {len(orphans)} prediction"
                                 f"{'s' if len(orphans) != 1 else ''} without a reference of "
                                 f"the same stem: {_stems(orphans)}")
            if not ref_path.is_dir() and not matched:
                unmatched.append(f"{ref_path}: no prediction with the stem {ref_path.stem!r} "
                                 f"in {set_name}")
            if ref_path.is_dir():
                missing = [stem for stem in refs.files
                           if stem not in found.files and stem not in found.duplicates]
                if missing:
                    unmatched.append(f"{set_name}: no prediction for {len(missing)} of "
                                     f"{len(refs.files)} references: {_stems(missing)}")
        pairs[set_name] = matched

    # read and compare; each reference is read once
    ref_cache: dict = {}
    results: dict = {}
    rows: list = []
    for set_name, matched in pairs.items():
        results[set_name] = {}
        for stem in sorted(matched):
            p_path, r_path = matched[stem]
            try:
                if r_path not in ref_cache:
                    ref_cache[r_path] = read_mask(r_path, threshold=threshold)
                    if not ref_cache[r_path].any():
                        notes.append(f"{r_path}: reference mask is empty (no foreground pixel); "
                                     "scored by the empty-mask rules")
                ref = ref_cache[r_path]
                pred = read_mask(p_path)
                if pred.shape != ref.shape:
                    raise InputError(f"mask size {_size(pred.shape)} does not match the "
                                     f"reference {r_path} size {_size(ref.shape)}", path=p_path)
                m = compare_masks(pred, ref, tolerance=tolerance)
            except SegcutError as exc:
                _err(err, None, str(exc))
                failed += 1
                continue
            results[set_name][stem] = m
            rows.append({"set": set_name, "image": stem, "prediction": str(p_path),
                         "reference": str(r_path), **{k: m[k] for k in CSV_MEASURES},
                         "distances_finite": m["distances_finite"]})

    for line in unmatched + notes:
        _err(err, None, line)
    compared = {k: v for k, v in results.items() if v}
    if not compared:
        _err(err, None, "no prediction could be compared with a reference")
        return EXIT_FAILED

    summary = summarize_comparison(compared, rank_by=rank_by, rng=seed)
    if csv_path is not None:
        write_text_atomic(csv_path, _csv_text(rows))
    if as_json:
        payload = {"command": "compare", "tolerance": float(tolerance),
                   "threshold": threshold, "summary": summary.to_dict(),
                   "images": [_json_row(r) for r in rows],
                   "unmatched": unmatched, "notes": notes,
                   "failed": failed}
        out.write(json.dumps(payload, indent=2, allow_nan=False) + "\n")
    else:
        if per_image:
            out.write(_per_image_table(rows) + "\n\n")
        out.write(summary_table(summary, tolerance=tolerance) + "\n")
    return EXIT_FAILED if failed else EXIT_OK


# --- output --------------------------------------------------------------------------------

def _stems(stems: list, limit: int = 12) -> str:
    shown = ", ".join(stems[:limit])
    return shown + (f" and {len(stems) - limit} more" if len(stems) > limit else "")


def _size(shape) -> str:
    return " x ".join(str(s) for s in shape[::-1]) if len(shape) == 2 else str(tuple(shape))


def _fmt(value: float, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "-"
    if math.isinf(value):
        return "inf"
    return f"{value:.{digits}f}"


def _cell(summary, metric: str) -> str:
    digits = 2 if metric in ("hausdorff", "assd") else 3
    s = summary.metrics[metric]
    if s.n == 0:
        return f"inf on all {s.n_infinite}" if s.n_infinite else "-"
    text = f"{_fmt(s.mean, digits)} [{_fmt(s.ci_low, digits)}, {_fmt(s.ci_high, digits)}]"
    if s.n_infinite:
        text += f", inf on {s.n_infinite}"
    return text


def _table(header: list, body: list, *, right: set) -> str:
    widths = [max(len(str(r[i])) for r in [header] + body) for i in range(len(header))]
    lines = []
    for k, r in enumerate([header] + body):
        cells = [str(c).rjust(w) if i in right else str(c).ljust(w)
                 for i, (c, w) in enumerate(zip(r, widths))]
        lines.append("  ".join(cells).rstrip())
        if k == 0:
            lines.append("  ".join("-" * w for w in widths))
    return "\n".join(lines)


def summary_table(summary, *, tolerance: float) -> str:
    """The ranked sets side by side (one column each, best first) and the paired comparison."""
    metrics = [m for m in _TITLES if m in summary.sets[0].metrics]
    header = ["measure"] + [f"{s.rank}. {s.name}" for s in summary.sets]
    body = [["images"] + [str(s.n_images) for s in summary.sets]]
    body += [[_TITLES[m]] + [_cell(s, m) for s in summary.sets] for m in metrics]
    pct = round(100 * summary.confidence)
    lines = [
        f"Means over images [{pct}% bootstrap interval, {summary.n_resamples} resamples]; "
        f"boundary tolerance {tolerance:g} px; sets ranked by {summary.rank_by}, best first.",
        _table(header, body, right=set()),
    ]
    if any(s.metrics[m].n_infinite for s in summary.sets for m in metrics):
        lines.append("inf: one mask has a boundary and the other has none (an empty or full "
                     "mask); such images are left out of that distance's mean.")
    p = summary.paired
    if p is not None:
        lines.append("")
        lines.append(
            f"{p.first} minus {p.second}, {p.metric} on the {p.n_images} "
            f"image{'s' if p.n_images != 1 else ''} both have: mean difference "
            f"{_fmt(p.mean_difference, 4)} [{_fmt(p.ci_low, 4)}, {_fmt(p.ci_high, 4)}] "
            f"(paired bootstrap); Wilcoxon signed-rank p = {_fmt_p(p.p_value)}"
        )
    return "\n".join(lines)


def _fmt_p(p: float) -> str:
    if p is None or math.isnan(p):
        return "- (needs 2 images or more)"
    return f"{p:.3f}" if p >= 0.001 else f"{p:.1e}"


def _per_image_table(rows: list) -> str:
    metrics = list(_TITLES)
    header = ["set", "image"] + [_TITLES[m] for m in metrics]
    body = [[r["set"], r["image"]] + [_fmt(r[m], 2 if m in ("hausdorff", "assd") else 3)
                                      for m in metrics] for r in rows]
    return _table(header, body, right=set(range(2, 2 + len(metrics))))


def _json_row(row: dict) -> dict:
    out = {}
    for k, v in row.items():
        out[k] = None if isinstance(v, float) and not math.isfinite(v) else v
    return out


def _csv_text(rows: list) -> str:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    columns = ["set", "image", "prediction", "reference", *CSV_MEASURES]
    writer.writerow(columns)
    for r in rows:
        writer.writerow([_csv_value(r[c]) for c in columns])
    return buf.getvalue()


def _csv_value(v):
    if isinstance(v, float):
        return "inf" if math.isinf(v) else repr(v)
    return v
