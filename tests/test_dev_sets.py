"""Quality floors on small fixed subsets of the public dev sets (``../shared/data``).

The outside reference is each set's own figure/ground masks: nuclei-dev's from the
2018 Data Science Bowl annotations (BBBC038, Caicedo et al., Nature Methods 2019),
horses-dev's from the Weizmann Horse Database (Borenstein & Ullman, ECCV 2002);
agreement is the IoU of ``compare_masks``. Each floor is the mean IoU measured on the subset with the default
settings, minus 0.05 (measured figures beside each check); the full sets are measured
by ``tests/benchmarks/bench_quality.py``. Skipped, with the reason, when the data is
absent.
"""

from __future__ import annotations

import numpy as np
import pytest

from checks import SHARED_DATA
from segcut.config import SplitConfig
from segcut.pipeline import split
from segcut.scoring import compare_masks

NUCLEI = SHARED_DATA / "nuclei-dev"
HORSES = SHARED_DATA / "horses-dev"

#: The first six nuclei-dev images of at most 320 x 256 pixels (dim fluorescence and
#: brightfield both), so the check stays quick.
NUCLEI_SUBSET = ("cell001.png", "cell002.png", "cell004.png", "cell005.png", "cell007.png",
                 "cell008.png")
#: Every tenth horses-dev photograph, from the first.
HORSES_SUBSET = ("horse001.png", "horse011.png", "horse021.png", "horse031.png",
                 "horse041.png", "horse051.png")


def _load(folder, name):
    from PIL import Image

    image = np.asarray(Image.open(folder / "images" / name).convert("RGB"))
    ref = np.asarray(Image.open(folder / "masks" / name).convert("L")) > 127
    return image, ref


def _bounding_box(mask):
    """(x0, y0, x1, y1) of a mask, x the column, x1 and y1 exclusive (plain numpy)."""
    rows = np.flatnonzero(mask.any(axis=1))
    cols = np.flatnonzero(mask.any(axis=0))
    return int(cols[0]), int(rows[0]), int(cols[-1]) + 1, int(rows[-1]) + 1


@pytest.mark.skipif(not (NUCLEI / "images").is_dir(),
                    reason="microscopy dev images (../shared/data/nuclei-dev) are not present")
def test_nuclei_dev_subset_no_prior():
    """No prior, default settings: measured mean IoU 0.819 on this subset."""
    ious = []
    for name in NUCLEI_SUBSET:
        image, ref = _load(NUCLEI, name)
        result = split(image)
        assert result.orientation == "border_rule"
        ious.append(compare_masks(result.mask, ref)["iou"])
    assert np.mean(ious) >= 0.77, dict(zip(NUCLEI_SUBSET, np.round(ious, 3)))


@pytest.mark.skipif(not (HORSES / "images").is_dir(),
                    reason="dev photographs (../shared/data/horses-dev) are not present")
def test_horses_dev_subset_tight_box():
    """The reference mask's bounding box as ``box``: measured mean IoU 0.767 on this
    subset; no foreground outside the box."""
    ious = []
    for name in HORSES_SUBSET:
        image, ref = _load(HORSES, name)
        x0, y0, x1, y1 = _bounding_box(ref)
        result = split(image, SplitConfig(box=(x0, y0, x1, y1)))
        outside = result.mask.copy()
        outside[y0:y1, x0:x1] = False
        assert not outside.any(), name
        ious.append(compare_masks(result.mask, ref)["iou"])
    assert np.mean(ious) >= 0.72, dict(zip(HORSES_SUBSET, np.round(ious, 3)))


@pytest.mark.skipif(not (NUCLEI / "images").is_dir(),
                    reason="microscopy dev images (../shared/data/nuclei-dev) are not present")
def test_nuclei_dev_shaded_fluorescence_is_flattened():
    """cell076: dim nuclei under strong uneven illumination. Measured IoU 0.544 with the
    default settings (the background flattened at radius 64), 0.003 with
    ``background_radius = 0``, where the bright patch of illumination is taken."""
    image, ref = _load(NUCLEI, "cell076.png")
    result = split(image)
    assert result.background["rule"] == "gain" and result.background["objects"] == "bright"
    assert compare_masks(result.mask, ref)["iou"] >= 0.49
    plain = split(image, SplitConfig(background_radius=0))
    assert compare_masks(plain.mask, ref)["iou"] < 0.2
