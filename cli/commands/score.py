"""``segcut score``: the cut score of given masks on an image's graph, with the bound.

For each image, the graph is built exactly as ``segcut split`` builds it (same
config; the image's seed derived from the config's seed and the image file's
content, as the batch runner does), so the mask ``segcut split`` wrote scores its
recorded cut value. Images and masks given as folders are searched recursively and
matched by their path inside the folders without the suffix, then by file name where
that is unambiguous (as ``segcut compare`` matches).
"""

from __future__ import annotations

import csv
import io
import math
import sys
from pathlib import Path

from ..common import (EXIT_FAILED, EXIT_OK, FileSet, NothingDone, UsageError, check_exists,
                      collect_files, duplicate_lines, is_image_folder, match_files, path_groups,
                      size_text, table, unmatched_entry, unmatched_lines, write_json)
from ..common import err as common_err

CSV_COLUMNS = ("image", "mask", "path", "rank", "value", "upper_bound", "gap", "agreement",
               "foreground_fraction", "solver_value", "n_superpixels", "seed")


def _plan(image_path: Path, mask_paths: list) -> tuple:
    """``(jobs, unmatched, problems)``: ``jobs[key] = (image, [(mask name, mask path)])``."""
    image_is_folder = is_image_folder(image_path)
    if image_is_folder:
        images = collect_files([image_path], name="images")
    else:
        images = FileSet(name="images", files={image_path.stem: image_path})
    problems = duplicate_lines(images, "image")
    if not images.files and not images.duplicates:
        raise UsageError("no images found (looked for image files in it and its sub-folders)",
                         path=image_path)
    jobs = {key: (path, []) for key, path in sorted(images.files.items())}
    key_of = {path: key for key, path in images.files.items()}
    unmatched: list = []
    for name, paths in path_groups(mask_paths, image_is_folder):
        if not image_is_folder and not is_image_folder(paths[0]):
            _add_mask(jobs[image_path.stem][1], name, paths[0])  # a file for the one image
            continue
        found = collect_files(paths, name=name)
        problems += duplicate_lines(found, "mask")
        matched, masks_only, images_only = match_files(found.files, images.files)
        for _, (mask, image) in sorted(matched.items()):
            _add_mask(jobs[key_of[image]][1], name, mask)
        if image_is_folder:
            unmatched.append(unmatched_entry(name, "mask without an image",
                                             [found.files[k] for k in masks_only]))
        unmatched.append(unmatched_entry(name, "image without a mask",
                                         [images.files[k] for k in images_only]))
    return jobs, [u for u in unmatched if u["count"]], problems


def _read_masks(named: list, path: Path, spatial_shape, err) -> tuple:
    """``({(name, mask path): mask}, failures)`` of one image's masks."""
    from segcut.errors import SegcutError
    from segcut.io import read_mask

    arrays, failed = {}, 0
    for name, mpath in named:
        try:
            m = read_mask(mpath)
        except SegcutError as exc:
            common_err(err, None, str(exc))
            failed += 1
            continue
        if m.shape != tuple(spatial_shape):
            common_err(err, mpath, f"mask size {size_text(m.shape)} does not match the image "
                       f"{path} size {size_text(spatial_shape)}")
            failed += 1
            continue
        arrays[(name, str(mpath))] = m
    return arrays, failed


def _score_images(jobs: dict, config, seeds, err) -> tuple:
    """Score every image's masks; ``(results, failed)``."""
    from segcut.batch import hash_file, image_seed
    from segcut.errors import SegcutError
    from segcut.io import read_image
    from segcut.scoring import score as score_masks

    results, failed = [], 0
    for stem, (path, named) in jobs.items():
        if not named:
            continue
        try:
            data = read_image(path)
        except SegcutError as exc:
            common_err(err, None, str(exc))
            failed += 1
            continue
        arrays, bad = _read_masks(named, path, data.spatial_shape, err)
        failed += bad
        if not arrays:
            continue
        image_rng = image_seed(config.seed, hash_file(path))
        try:
            r = score_masks(data.array, {name: m for (name, _), m in arrays.items()},
                            config=config, seeds=seeds, channel_axis=data.channel_axis,
                            rng=image_rng)
        except ValueError as exc:  # the pipeline's refusal of a malformed image or seeds
            common_err(err, path, " ".join(str(exc).split()))
            failed += 1
            continue
        results.append((stem, path, r, {name: p for (name, p) in arrays}))
    return results, failed


def score(image, masks, *, config_path=None, seeds_path=None, overrides=None,
          as_json: bool = False, csv_path=None, stdout=None, stderr=None) -> int:
    """Score masks on images' graphs; print a table per image; return an exit code.

    Parameters
    ----------
    image : str
        An image file or a folder of images (searched recursively).
    masks : list of str
        Mask files or folders. With an image *file*, every mask file belongs to it
        and folders are searched for the image's name. With an image *folder*, masks
        are matched to images by their path inside the folders without the suffix,
        then by file name where that is unambiguous; each mask folder is named by its
        path, loose files together are named ``files``.
    config_path : str or None
        TOML config (for example a run folder's ``run.toml``).
    seeds_path : str or None
        Seed marker image (single image only).
    overrides : dict, optional
        Config fields set on the command line (``--seed``, ``--superpixels``, ...),
        as ``segcut split`` takes them.
    as_json : bool
        One JSON object instead of tables.
    csv_path : str or None
        One row per (image, mask) written to this file.

    Returns
    -------
    int
        0 when every mask was scored; 1 when some input failed (the rest were scored).

    Raises
    ------
    UsageError
        A missing path, a bad option, or seeds with an image folder.
    NothingDone
        No mask could be scored.
    """
    from segcut.files import write_text_atomic
    from segcut.io import read_seeds

    from .split import build_config

    out = sys.stdout if stdout is None else stdout
    err = sys.stderr if stderr is None else stderr
    image_path = Path(image)
    check_exists(image_path)
    mask_paths = [Path(m) for m in masks]
    for m in mask_paths:
        check_exists(m)
    config = build_config(config_path=config_path, overrides=overrides)
    if seeds_path is not None and is_image_folder(image_path):
        raise UsageError("--seeds takes one marker image, so IMAGE must be one image file",
                         path=image_path)
    jobs, unmatched, problems = _plan(image_path, mask_paths)
    for line in problems:
        common_err(err, None, line)
    seeds = None if seeds_path is None else read_seeds(seeds_path)
    results, failed = _score_images(jobs, config, seeds, err)
    failed += len(problems)
    for line in unmatched_lines(unmatched):
        common_err(err, None, line)
    n_unmatched = sum(u["count"] for u in unmatched)
    if not results:
        raise NothingDone("no mask could be scored", details={
            "unmatched": unmatched, "n_unmatched": n_unmatched, "failed": failed})
    rows = [_row(stem, path, r, m, paths[m.name])
            for stem, path, r, paths in results for m in r.ranking]
    if csv_path is not None:
        write_text_atomic(csv_path, _csv_text(rows))
    if as_json:
        write_json(out, {"command": "score", "config_hash": config.config_hash(),
                         "images": [{"image": str(path), "stem": stem, **r.to_dict(),
                                     "masks": [{**m.to_dict(), "path": paths[m.name]}
                                               for m in r.masks]}
                                    for stem, path, r, paths in results],
                         "unmatched": unmatched, "n_unmatched": n_unmatched, "failed": failed})
    else:
        blocks = [_image_table(path, r) for _, path, r, _ in results]
        if len(results) > 1:
            blocks.append(_overall_table(results))
        out.write("\n\n".join(blocks) + "\n")
    return EXIT_FAILED if failed else EXIT_OK


def _add_mask(named: list, name: str, path: Path) -> None:
    """Append ``(name, path)``, making the name unique among the image's masks."""
    taken = {n for n, _ in named}
    unique, k = name, 2
    while unique in taken:
        unique, k = f"{name} ({k})", k + 1
    named.append((unique, path))


def _num(v, digits=10) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{v:.{digits}g}"


def _pct(v) -> str:
    return "-" if v is None else f"{100 * v:.3g}%"


def _image_table(path, r) -> str:
    bound = "none (the method gave no certificate)" if r.upper_bound is None \
        else f"{_num(r.upper_bound)} ({r.method})"
    head = (f"{path}: {r.n_superpixels} superpixels, {r.n_vertices} graph vertices; "
            f"certified upper bound {bound}; the bound solve's own cut {_num(r.solver_value)}")
    header = ["rank", "mask", "cut value", "gap", "agreement", "foreground"]
    body = [[m.rank, m.name, _num(m.value), _pct(m.gap), f"{m.agreement:.3f}",
             f"{m.foreground_fraction:.3f}"] for m in r.ranking]
    return head + "\n" + table(header, body, right={0, 2, 3, 4, 5})


def _overall_table(results) -> str:
    per_name: dict = {}
    for _, _, r, _ in results:
        for m in r.masks:
            per_name.setdefault(m.name, []).append(m)
    header = ["mask", "images", "mean gap", "mean agreement", "ranked first"]
    body = []
    for name, ms in per_name.items():
        gaps = [m.gap for m in ms if m.gap is not None]
        mean_gap = sum(gaps) / len(gaps) if gaps else None
        body.append([name, len(ms), _pct(mean_gap),
                     f"{sum(m.agreement for m in ms) / len(ms):.3f}",
                     sum(m.rank == 1 for m in ms)])
    body.sort(key=lambda row: (-row[4], row[0]))
    return f"Over {len(results)} images:\n" + table(header, body, right={1, 2, 3, 4})


def _row(stem, path, r, m, mask_path) -> dict:
    return {"image": str(path), "mask": m.name, "path": mask_path, "rank": m.rank,
            "value": m.value, "upper_bound": r.upper_bound, "gap": m.gap,
            "agreement": m.agreement, "foreground_fraction": m.foreground_fraction,
            "solver_value": r.solver_value, "n_superpixels": r.n_superpixels, "seed": r.seed}


def _csv_text(rows: list) -> str:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(CSV_COLUMNS)
    for r in rows:
        writer.writerow(["" if r[c] is None else (repr(r[c]) if isinstance(r[c], float) else r[c])
                         for c in CSV_COLUMNS])
    return buf.getvalue()
