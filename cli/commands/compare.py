"""``segcut compare``: agreement of predicted masks with reference masks.

Predictions and references are files or folders (searched recursively); files are
matched by their path inside the folders without the suffix, so ``day1/horse007.png``
matches ``day1/horse007.jpg``, then by file name where that is unambiguous. Every
prediction folder is one prediction set; the sets are shown side by side, ranked, and
the best two are compared image by image.
"""

from __future__ import annotations

import csv
import io
import math
import sys
from pathlib import Path

from ..common import (EXIT_FAILED, EXIT_OK, FileSet, NothingDone, UsageError, check_exists,
                      collect_files, duplicate_lines, is_image_folder, match_files, path_groups,
                      plural, size_text, table, unmatched_entry, unmatched_lines, write_json)
from ..common import err as common_err
from ..common import fmt_number as _fmt

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


def _pair_sets(pred_paths: list, ref_path: Path) -> tuple:
    """Match every prediction set with the references.

    Returns ``(pairs, unmatched, problems)``: ``pairs[set] = {key: (pred, ref)}``;
    ``unmatched`` a list of :func:`unmatched_entry`; ``problems`` one-line messages
    about ambiguous files (each counts as a failed input).
    """
    ref_is_folder = is_image_folder(ref_path)
    if ref_is_folder:
        refs = collect_files([ref_path], name="reference")
    else:
        refs = FileSet(name="reference", files={ref_path.stem: ref_path})
    problems = duplicate_lines(refs, "reference")
    if not refs.files and not refs.duplicates:
        raise UsageError("no reference masks found (looked for image files in it and its "
                         "sub-folders)", path=ref_path)
    pairs, unmatched = {}, []
    for set_name, paths in path_groups(pred_paths, ref_is_folder):
        if set_name in pairs:
            set_name = f"{set_name} ({len(pairs) + 1})"
        if not ref_is_folder and not is_image_folder(paths[0]):
            pairs[set_name] = {ref_path.stem: (paths[0], ref_path)}  # a file against the one
            continue
        found = collect_files(paths, name=set_name)
        problems += duplicate_lines(found, "prediction")
        matched, preds_only, refs_only = match_files(found.files, refs.files)
        if ref_is_folder:
            refs_only = [k for k in refs_only if k not in found.duplicates]
            unmatched += [
                unmatched_entry(set_name, "prediction without a reference",
                                [found.files[k] for k in preds_only]),
                unmatched_entry(set_name, "reference without a prediction",
                                [refs.files[k] for k in refs_only])]
        elif not matched:
            unmatched.append(unmatched_entry(set_name, "reference without a prediction",
                                             [ref_path]))
        pairs[set_name] = matched
    return pairs, [u for u in unmatched if u["count"]], problems


def _compare_pairs(pairs: dict, *, threshold, tolerance, err) -> tuple:
    """Read and compare every pair (each reference read once).

    Returns ``(results, rows, notes, failed)``.
    """
    from segcut.errors import SegcutError
    from segcut.io import read_mask
    from segcut.scoring import compare_masks

    ref_cache: dict = {}
    results, rows, notes, failed = {}, [], [], 0
    for set_name, matched in pairs.items():
        results[set_name] = {}
        for key in sorted(matched):
            p_path, r_path = matched[key]
            try:
                if r_path not in ref_cache:
                    ref_cache[r_path] = read_mask(r_path, threshold=threshold)
                    if not ref_cache[r_path].any():
                        notes.append(f"{r_path}: reference mask is empty (no foreground pixel); "
                                     "scored by the empty-mask rules")
                ref = ref_cache[r_path]
                pred = read_mask(p_path)
                if pred.shape != ref.shape:
                    raise SegcutError(f"mask size {size_text(pred.shape)} does not match the "
                                      f"reference {r_path} size {size_text(ref.shape)}",
                                      path=p_path)
                m = compare_masks(pred, ref, tolerance=tolerance)
            except SegcutError as exc:
                common_err(err, None, str(exc))
                failed += 1
                continue
            results[set_name][key] = m
            rows.append({"set": set_name, "image": key, "prediction": str(p_path),
                         "reference": str(r_path), **{k: m[k] for k in CSV_MEASURES},
                         "distances_finite": m["distances_finite"]})
    return results, rows, notes, failed


# --- the command -------------------------------------------------------------------------

def compare(predictions, *, reference, tolerance: float = 2.0, threshold: float | None = None,
            rank_by: str = "iou", seed: int = 0, per_image: bool = False,
            as_json: bool = False, csv_path=None, stdout=None, stderr=None) -> int:
    """Compare prediction masks with reference masks; print a table; return an exit code.

    Parameters
    ----------
    predictions : list of str
        Files or folders (searched recursively). Each folder is one prediction set
        (named by the path as given). With a reference *folder*, the files given
        directly form one more set named ``files``; with a reference *file*, each
        prediction file is its own set compared with that reference, and folders are
        searched for the reference's name. Files are matched by their path inside
        the folders without the suffix (``day1/a``), then by file name where that is
        unambiguous (:func:`segcut_cli.common.match_files`).
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
        were still compared). Unmatched files are listed and counted but do not fail
        the run.

    Raises
    ------
    UsageError
        A path that does not exist, or a reference folder without masks.
    NothingDone
        No prediction could be compared with a reference.
    """
    from segcut.files import write_text_atomic
    from segcut.scoring import summarize_comparison

    out = sys.stdout if stdout is None else stdout
    err = sys.stderr if stderr is None else stderr
    ref_path = Path(reference)
    check_exists(ref_path)
    pred_paths = [Path(p) for p in predictions]
    for p in pred_paths:
        check_exists(p)
    pairs, unmatched, problems = _pair_sets(pred_paths, ref_path)
    for line in problems:
        common_err(err, None, line)
    results, rows, notes, failed = _compare_pairs(pairs, threshold=threshold,
                                                  tolerance=tolerance, err=err)
    failed += len(problems)
    for line in unmatched_lines(unmatched) + notes:
        common_err(err, None, line)
    n_unmatched = sum(u["count"] for u in unmatched)
    compared = {k: v for k, v in results.items() if v}
    if not compared:
        raise NothingDone("no prediction could be compared with a reference "
                          f"({plural(n_unmatched, 'file')} without a partner)",
                          details={"unmatched": unmatched, "n_unmatched": n_unmatched,
                                   "failed": failed})
    summary = summarize_comparison(compared, rank_by=rank_by, rng=seed)
    if csv_path is not None:
        write_text_atomic(csv_path, _csv_text(rows))
    if as_json:
        write_json(out, {"command": "compare", "tolerance": float(tolerance),
                         "threshold": threshold, "summary": summary.to_dict(),
                         "images": rows, "unmatched": unmatched, "n_unmatched": n_unmatched,
                         "notes": notes, "failed": failed})
    else:
        if per_image:
            out.write(_per_image_table(rows) + "\n\n")
        out.write(summary_table(summary, tolerance=tolerance) + "\n")
    return EXIT_FAILED if failed else EXIT_OK


# --- output --------------------------------------------------------------------------------

def _cell(summary, metric: str) -> str:
    digits = 2 if metric in ("hausdorff", "assd") else 3
    s = summary.metrics[metric]
    if s.n == 0:
        return f"inf on all {s.n_infinite}" if s.n_infinite else "-"
    text = f"{_fmt(s.mean, digits)} [{_fmt(s.ci_low, digits)}, {_fmt(s.ci_high, digits)}]"
    if s.n_infinite:
        text += f", inf on {s.n_infinite}"
    return text


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
        table(header, body, right=set()),
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
    return table(header, body, right=set(range(2, 2 + len(metrics))))


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
