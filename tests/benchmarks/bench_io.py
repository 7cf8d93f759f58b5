"""File input and output: what reading an image and writing its results costs.

For a 512x512 picture (smooth shapes, texture and noise, so the files compress like
photographs), measures the median seconds of ``read_image`` for each stored kind and of
each writer segcut uses per image, in one run, side by side. The end-to-end target for
one 512x512 RGB photograph is 1.0 s (read, superpixels, graph, solve, write); this
table says how much of it file input and output take.

File sizes shown for writers are of the file written. Run it on a quiet machine: the
times include fsync, which depends on the disk.

Usage::

    python tests/benchmarks/bench_io.py [--repeats 15] [--size 512]
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import tifffile
from PIL import Image
from scipy import ndimage as ndi

from segcut.drawing import overlay_image, write_overlay
from segcut.files import append_json_line, write_text_atomic
from segcut.io import read_image, read_mask, write_image, write_mask


def make_picture(size: int, rng) -> np.ndarray:
    yy, xx = np.mgrid[0:size, 0:size] / size
    disc = (yy - 0.45) ** 2 + (xx - 0.55) ** 2 < 0.09
    texture = ndi.gaussian_filter(rng.standard_normal((size, size)), 2.0) * 25
    base = np.stack([150 + 60 * xx, 120 + 40 * yy, 90 + 0 * xx], axis=-1)
    base[disc] = (60, 140, 70)
    picture = base + texture[..., None] + rng.normal(0, 4, base.shape)
    return np.clip(picture, 0, 255).astype(np.uint8), disc


def median_seconds(action, repeats: int) -> float:
    action()  # warm up (imports, caches)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=15)
    parser.add_argument("--size", type=int, default=512)
    args = parser.parse_args(argv)
    rng = np.random.default_rng(0)
    picture, mask = make_picture(args.size, rng)
    gray16 = (picture.mean(axis=-1) * 257).astype(np.uint16)
    rows = []
    with tempfile.TemporaryDirectory() as folder:
        root = Path(folder)
        Image.fromarray(picture).save(root / "p.png")
        Image.fromarray(picture).save(root / "p.jpg", quality=90)
        exif = Image.Exif()
        exif[0x0112] = 6
        Image.fromarray(picture).save(root / "rot.jpg", quality=90, exif=exif)
        Image.fromarray(picture).save(root / "p.bmp")
        Image.fromarray(picture).convert("P").save(root / "pal.png")
        tifffile.imwrite(root / "g16.tif", gray16, compression="zlib")
        tifffile.imwrite(root / "f32.tif", picture.astype(np.float32) / 255)
        Image.fromarray(picture).save(root / "lzw.tif", compression="tiff_lzw")
        write_mask(mask, root / "m.png")
        for label, name in [("read PNG RGB", "p.png"), ("read JPEG RGB", "p.jpg"),
                            ("read JPEG, EXIF rotated", "rot.jpg"), ("read BMP RGB", "p.bmp"),
                            ("read PNG palette", "pal.png"), ("read TIFF 16-bit gray", "g16.tif"),
                            ("read TIFF float32 RGB", "f32.tif"),
                            ("read TIFF LZW (Pillow)", "lzw.tif")]:
            size = (root / name).stat().st_size
            rows.append((label, size, median_seconds(lambda n=name: read_image(root / n),
                                                      args.repeats)))
        rows.append(("read_mask PNG", (root / "m.png").stat().st_size,
                     median_seconds(lambda: read_mask(root / "m.png"), args.repeats)))
        rows.append(("write_mask PNG", None,
                     median_seconds(lambda: write_mask(mask, root / "out_m.png"), args.repeats)))
        rows.append(("overlay_image (in memory)", None,
                     median_seconds(lambda: overlay_image(picture, mask), args.repeats)))
        rows.append(("write_overlay PNG", None,
                     median_seconds(lambda: write_overlay(picture, mask, root / "out_o.png"),
                                    args.repeats)))
        shown = overlay_image(picture, mask)
        rows.append(("  same overlay at zlib level 6", None,
                     median_seconds(lambda: write_image(shown, root / "out_o6.png",
                                                        channel_axis=-1), args.repeats)))
        sizes = {"write_overlay PNG": (root / "out_o.png").stat().st_size,
                 "  same overlay at zlib level 6": (root / "out_o6.png").stat().st_size}
        rows = [(label, sizes.get(label, size), seconds) for label, size, seconds in rows]
        rows.append(("write_overlay, 16-bit gray", None,
                     median_seconds(lambda: write_overlay(gray16, mask, root / "out_g.png"),
                                    args.repeats)))
        record = {"input": "p.png", "status": "ok", "value": 1234.5, "upper_bound": 1250.0,
                  "gap": 0.0124, "warnings": [], "seconds": {"read": 0.01, "solve": 0.1}}
        rows.append(("append_json_line (fsync)", None,
                     median_seconds(lambda: append_json_line(root / "r.jsonl", record),
                                    args.repeats)))
        rows.append(("write_text_atomic (fsync)", None,
                     median_seconds(lambda: write_text_atomic(root / "run.toml", "seed = 0\n"),
                                    args.repeats)))
        typical = sum(s for label, _, s in rows
                      if label in ("read PNG RGB", "write_mask PNG", "write_overlay PNG",
                                   "append_json_line (fsync)"))
    print(f"file input/output, {args.size}x{args.size}, median of {args.repeats} runs")
    print(f"{'operation':32s} {'file bytes':>11s} {'ms':>8s}")
    for label, size, seconds in rows:
        shown = "" if size is None else f"{size:,}"
        print(f"{label:32s} {shown:>11s} {1000 * seconds:8.2f}")
    print(f"{'per image (read PNG + mask + overlay + record)':48s} {1000 * typical:8.2f} ms "
          f"= {100 * typical / 1.0:.1f}% of the 1.0 s end-to-end budget")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
