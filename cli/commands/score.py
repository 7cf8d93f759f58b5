"""``segcut score``: the cut score of given masks on an image's graph, with the bound.

For each image, the graph is built exactly as ``segcut split`` builds it (same
config; the image's seed derived from the config's seed and the image file's
content, as the batch runner does), so the mask ``segcut split`` wrote scores its
recorded cut value. Images and masks given as folders are matched by file stem.
"""

from __future__ import annotations

import csv
import io
import json
import math
import sys
from pathlib import Path

from .compare import FileSet, _err, _stems, _table, check_exists, collect_files

EXIT_OK, EXIT_FAILED = 0, 1

CSV_COLUMNS = ("image", "mask", "path", "rank", "value", "upper_bound", "gap", "agreement",
               "foreground_fraction", "solver_value", "n_superpixels", "seed")


def score(image, masks, *, config_path=None, seeds_path=None, seed=None, as_json: bool = False,
          csv_path=None, stdout=None, stderr=None) -> int:
    """Score masks on images' graphs; print a table per image; return an exit code.

    Parameters
    ----------
    image : str
        An image file or a folder of images.
    masks : list of str
        Mask files or folders. With an image *file*, every mask file belongs to it
        and folders are searched for the image's stem. With an image *folder*, masks
        are matched to images by stem; each mask folder is named by its path, loose
        files together are named ``files``.
    config_path : str or None
        TOML config (for example a run folder's ``run.toml``).
    seeds_path : str or None
        Seed marker image (single image only).
    seed : int or None
        Run seed, replacing the config's seed (as ``segcut split --seed``).
    as_json : bool
        One JSON object instead of tables.
    csv_path : str or None
        One row per (image, mask) written to this file.

    Returns
    -------
    int
        0 when every mask was scored; 1 when some input failed (the rest were scored).
    """
    from segcut.batch import hash_file, image_seed
    from segcut.config import SplitConfig, load_config
    from segcut.errors import InputError, SegcutError
    from segcut.io import read_image, read_mask, read_seeds, write_text_atomic
    from segcut.scoring import score as score_masks

    out = sys.stdout if stdout is None else stdout
    err = sys.stderr if stderr is None else stderr

    image_path = Path(image)
    check_exists(image_path)
    mask_paths = [Path(m) for m in masks]
    for m in mask_paths:
        check_exists(m)
    config = SplitConfig() if config_path is None else load_config(config_path)
    if seed is not None:
        config = config.replace(seed=int(seed))
    if seeds_path is not None and image_path.is_dir():
        raise InputError("--seeds takes one marker image, so IMAGE must be one image file",
                         path=image_path)

    # jobs[image_stem] = (image_path, [(mask_name, mask_path), ...])
    failed = 0
    unmatched: list = []
    if image_path.is_dir():
        images = collect_files([image_path], name="images")
        failed += _report_duplicates(images, "image", err)
        groups = [(str(p), [p]) for p in mask_paths if p.is_dir()]
        loose = [p for p in mask_paths if not p.is_dir()]
        if loose:
            groups.append(("files", loose))
    else:
        images = FileSet(name="images", files={image_path.stem: image_path})
        groups = [(str(p), [p]) for p in mask_paths]
    if not images.files and not images.duplicates:
        raise InputError("no images found (looked for image files directly inside)",
                         path=image_path)
    jobs = {stem: (path, []) for stem, path in sorted(images.files.items())}
    for name, paths in groups:
        found = collect_files(paths, name=name)
        failed += _report_duplicates(found, "mask", err)
        if not image_path.is_dir() and not paths[0].is_dir():
            _add_mask(jobs[image_path.stem][1], name, paths[0])  # a file for the one image
            continue
        orphans = []
        for stem, f in found.files.items():
            if stem in jobs:
                _add_mask(jobs[stem][1], name, f)
            elif image_path.is_dir():
                orphans.append(stem)
        if orphans:
            unmatched.append(f"{name}: {len(orphans)} mask{'s' if len(orphans) != 1 else ''} "
                             f"without an image of the same stem: {_stems(orphans)}")
        missing = [stem for stem in jobs if stem not in found.files and stem not in found.duplicates]
        if missing:
            unmatched.append(f"{name}: no mask for {len(missing)} of {len(jobs)} "
                             f"image{'s' if len(jobs) != 1 else ''}: {_stems(missing)}")

    seeds = None
    if seeds_path is not None:
        seeds = read_seeds(seeds_path)

    results = []
    for stem, (path, named) in jobs.items():
        if not named:
            continue
        try:
            data = read_image(path)
        except SegcutError as exc:
            _err(err, None, str(exc))
            failed += 1
            continue
        arrays = {}
        for name, mpath in named:
            try:
                m = read_mask(mpath)
            except SegcutError as exc:
                _err(err, None, str(exc))
                failed += 1
                continue
            if m.shape != tuple(data.spatial_shape):
                _err(err, mpath, f"mask size {_size(m.shape)} does not match the image "
                     f"{path} size {_size(data.spatial_shape)}")
                failed += 1
                continue
            arrays[(name, str(mpath))] = m
        if not arrays:
            continue
        image_rng = image_seed(config.seed, hash_file(path))
        try:
            r = score_masks(data.array, {name: m for (name, _), m in arrays.items()},
                            config=config, seeds=seeds, channel_axis=data.channel_axis,
                            rng=image_rng)
        except ValueError as exc:  # the pipeline's refusal of a malformed image or seeds
            _err(err, path, " ".join(str(exc).split()))
            failed += 1
            continue
        paths = {name: p for (name, p) in arrays}
        results.append((stem, path, r, paths))

    for line in unmatched:
        _err(err, None, line)
    if not results:
        _err(err, None, "no mask could be scored")
        return EXIT_FAILED

    rows = [_row(stem, path, r, m, paths[m.name])
            for stem, path, r, paths in results for m in r.ranking]
    if csv_path is not None:
        write_text_atomic(csv_path, _csv_text(rows))
    if as_json:
        payload = {"command": "score", "config_hash": config.config_hash(),
                   "images": [{"image": str(path), "stem": stem, **r.to_dict(),
                               "masks": [{**m.to_dict(), "path": paths[m.name]} for m in r.masks]}
                              for stem, path, r, paths in results],
                   "unmatched": unmatched, "failed": failed}
        out.write(json.dumps(payload, indent=2, allow_nan=False) + "\n")
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


def _report_duplicates(found: FileSet, kind: str, err) -> int:
    for stem, dup in sorted(found.duplicates.items()):
        _err(err, dup[0].parent, f"several {kind} files have the stem {stem!r} "
             f"({', '.join(p.name for p in dup)}); rename all but one")
    return len(found.duplicates)


def _size(shape) -> str:
    return " x ".join(str(s) for s in tuple(shape)[::-1]) if len(shape) == 2 else str(tuple(shape))


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
    return head + "\n" + _table(header, body, right={0, 2, 3, 4, 5})


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
    return f"Over {len(results)} images:\n" + _table(header, body, right={1, 2, 3, 4})


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
