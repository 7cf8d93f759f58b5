"""The project's demo scans (pressed leaves, see ``sample_images/README.md``) as napari sample data.

Each sample opens the scan as an image layer and its exact true mask as a hidden
Labels layer ("truth"), handy for trying the scoring; ``sprig_trio`` also brings its
drawn seed marker as a Labels layer (1 foreground, 2 background).

The scans live in ``sample_images/`` of a source checkout, beside this package's
folder, so the samples need segcut installed from a checkout (``pip install -e``).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

import segcut

__all__ = ["SAMPLES", "sample_folder", "sample_layers"]

#: Sample key -> file name in ``sample_images/images``.
SAMPLES = {
    "oak_gray": "oak_gray.png",
    "willow_pair": "willow_pair.png",
    "sprig_trio": "sprig_trio.png",
    "maple_on_mat": "maple_on_mat.png",
    "birch_shaded": "birch_shaded.png",
    "beech_velvet": "beech_velvet.png",
    "ivy_nir": "ivy_nir.tif",
    "rowan_noisy": "rowan_noisy.png",
}


def sample_folder() -> Path:
    """The ``sample_images`` folder of the source checkout this package runs from."""
    folder = Path(__file__).resolve().parent.parent / "sample_images"
    if not (folder / "images").is_dir():
        raise FileNotFoundError(f"{folder}: segcut's demo scans come with a source checkout; "
                                "install segcut with pip install -e from one")
    return folder


def sample_layers(key: str) -> list:
    """Layers of one sample: the scan, its truth and (when there is one) its seed marker."""
    if key not in SAMPLES:
        raise ValueError(f"unknown sample {key!r}; known: {', '.join(SAMPLES)}")
    folder = sample_folder()
    path = folder / "images" / SAMPLES[key]
    image = segcut.read_image(path)
    layers = [(image.array, {"name": key, "rgb": image.channel_axis is not None,
                             "metadata": {"segcut": {"source": str(path)}}}, "image")]
    truth = folder / "truth" / f"{key}.png"
    if truth.is_file():
        layers.append((segcut.read_mask(truth).astype(np.uint8),
                       {"name": f"{key} truth", "visible": False}, "labels"))
    seeds = folder / "seeds" / f"{key}.png"
    if seeds.is_file():
        layers.append((segcut.read_seeds(seeds), {"name": f"{key} seeds"}, "labels"))
    return layers


def _sample_function(key: str):
    def load():
        return sample_layers(key)

    load.__name__ = load.__qualname__ = f"sample_{key}"
    load.__doc__ = f"The demo scan {key!r} with its true mask."
    return load


for _key in SAMPLES:
    globals()[f"sample_{_key}"] = _sample_function(_key)
__all__ += [f"sample_{key}" for key in SAMPLES]
