"""Generate segcut's demo images: pressed leaves on a herbarium scanning bench.

Every picture is drawn from a fixed seed, so running this script again gives the same
pixels (and, with the same Pillow/zlib build, the same bytes; see SHA256SUMS). Run it
from the project root:

    python sample_images/make_samples.py            # rewrite sample_images/
    python sample_images/make_samples.py --out DIR  # write somewhere else

Outputs (relative to the output folder):

- ``images/<name>.png`` (or ``.tif``): the pictures segcut splits;
- ``truth/<name>.png``: the true mask of each picture (0 background, 255 leaf);
- ``seeds/<name>.png``: a drawn seed trimap for one picture (white = leaf,
  black = background, mid-gray = unknown), for trying ``--seeds``.

The truth is exact by construction: a pixel is leaf when its centre lies inside the
leaf outline (blade or stalk). The picture is then made from the truth: leaf and
paper colours, veins, paper fibre or cloth texture, a soft cast shadow, uneven lamp
light, a little optical blur and sensor noise.
"""

from __future__ import annotations

import argparse
import hashlib
import sys
from pathlib import Path

import numpy as np
from scipy import ndimage as ndi

HERE = Path(__file__).resolve().parent
try:
    from segcut.io import write_image, write_mask, write_text_atomic
except ImportError:  # run from a source checkout without installing
    sys.path.insert(0, str(HERE.parent))
    from segcut.io import write_image, write_mask, write_text_atomic

SEED = 20261201


# --------------------------------------------------------------------------- outlines


def _grid(shape):
    yy, xx = np.mgrid[0 : shape[0], 0 : shape[1]]
    return yy + 0.5, xx + 0.5  # pixel centres


def _local(yy, xx, centre, angle):
    """Coordinates along (u) and across (v) a leaf whose midrib points at ``angle``."""
    dy, dx = yy - centre[0], xx - centre[1]
    c, s = np.cos(angle), np.sin(angle)
    return dx * c + dy * s, -dx * s + dy * c


def lance_leaf(shape, *, centre, length, width, angle, teeth=0, tooth_depth=0.0, stalk=0.0,
               stalk_width=2.0):
    """A pointed, narrow blade (willow-like), optionally toothed, with a stalk at its base.

    Returns ``(blade, stalk, u, v)``: two boolean masks and the leaf-local coordinates
    scaled so the blade spans ``u`` in [-1, 1] and ``v`` in [-1, 1].
    """
    yy, xx = _grid(shape)
    along, across = _local(yy, xx, centre, angle)
    u = along / (length / 2.0)
    v = across / (width / 2.0)
    inside = np.clip(1.0 - u * u, 0.0, None)
    half = inside**0.75 * (1.0 + 0.25 * u)
    if teeth:
        phase = (u + 1.0) * teeth * np.pi
        half = half * (1.0 - tooth_depth * np.abs(np.sin(phase)))
    blade = (np.abs(u) < 1.0) & (np.abs(v) < half)
    stalk_mask = np.zeros(shape, bool)
    if stalk > 0:
        stalk_mask = (along < -length / 2.0 + 2.0) & (along > -length / 2.0 - stalk) & (
            np.abs(across) < stalk_width / 2.0
        )
        stalk_mask &= ~blade
    return blade, stalk_mask, u, v


def lobed_leaf(shape, *, centre, radius, angle, lobes=5, lobe_depth=0.3, stalk=0.0,
               stalk_width=2.5):
    """A palmate blade (maple- or oak-like) in polar form ``r(phi)``, with a stalk."""
    yy, xx = _grid(shape)
    along, across = _local(yy, xx, centre, angle)
    r = np.hypot(along, across)
    phi = np.arctan2(across, along)  # 0 points to the leaf tip
    wave = np.cos(lobes * phi)
    outline = radius * (1.0 - lobe_depth * (1.0 - wave) / 2.0)
    outline *= 0.55 + 0.45 * np.cos(phi / 2.0) ** 0.5  # narrower towards the base
    blade = r < outline
    stalk_mask = np.zeros(shape, bool)
    if stalk > 0:
        stalk_mask = (along < -0.3 * radius) & (along > -0.45 * radius - stalk) & (
            np.abs(across) < stalk_width / 2.0
        )
        stalk_mask &= ~blade
    return blade, stalk_mask, along / radius, across / radius


# --------------------------------------------------------------------------- surfaces


def fibre_paper(shape, rng, *, base, strength):
    """Mounting paper: a warm base colour with fibres running mostly left to right."""
    fibres = ndi.gaussian_filter(rng.standard_normal(shape), sigma=(0.7, 5.0))
    fibres /= fibres.std() + 1e-12
    mottle = ndi.gaussian_filter(rng.standard_normal(shape), sigma=12.0)
    mottle /= mottle.std() + 1e-12
    texture = strength * fibres + 0.6 * strength * mottle
    return np.asarray(base, float)[None, None, :] + texture[..., None]


def woven_mat(shape, rng, *, light, dark):
    """A plain-weave cloth: alternating warp and weft threads, period 8 pixels."""
    yy, xx = _grid(shape)
    warp = 0.5 + 0.5 * np.sin(2 * np.pi * xx / 8.0)
    weft = 0.5 + 0.5 * np.sin(2 * np.pi * yy / 8.0)
    over = (np.floor(xx / 8.0) + np.floor(yy / 8.0)) % 2 == 0
    pattern = np.where(over, warp, weft)
    pattern = pattern + 0.15 * ndi.gaussian_filter(rng.standard_normal(shape), 1.0)
    light, dark = np.asarray(light, float), np.asarray(dark, float)
    return dark[None, None, :] + pattern[..., None] * (light - dark)[None, None, :]


def velvet(shape, rng, *, base):
    """Dark velvet: a deep colour with soft, low-frequency sheen."""
    sheen = ndi.gaussian_filter(rng.standard_normal(shape), sigma=18.0)
    sheen /= sheen.std() + 1e-12
    return np.asarray(base, float)[None, None, :] * (1.0 + 0.12 * sheen[..., None])


def lamp(shape, *, centre, falloff, tilt=(0.0, 0.0)):
    """Uneven lighting: radial falloff around ``centre`` plus a linear tilt."""
    yy, xx = _grid(shape)
    diag2 = float(shape[0] ** 2 + shape[1] ** 2)
    radial = ((yy - centre[0]) ** 2 + (xx - centre[1]) ** 2) / diag2
    ramp = tilt[0] * (yy / shape[0] - 0.5) + tilt[1] * (xx / shape[1] - 0.5)
    return np.clip(1.0 - falloff * radial + ramp, 0.2, None)


def leaf_colour(blade, u, v, rng, *, tip, base, vein, n_side_veins=7):
    """Blade colour: a gradient from base to tip, a pale midrib and side veins."""
    t = np.clip((u + 1.0) / 2.0, 0.0, 1.0)[..., None]
    colour = (1.0 - t) * np.asarray(base, float) + t * np.asarray(tip, float)
    midrib = np.exp(-((v / 0.06) ** 2))
    side = np.exp(-((np.sin(np.pi * n_side_veins * (u - 0.8 * np.abs(v))) / 0.12) ** 2))
    side *= np.abs(v) < 0.9
    vein_weight = np.clip(midrib + 0.5 * side, 0.0, 1.0)[..., None]
    colour = (1.0 - vein_weight) * colour + vein_weight * np.asarray(vein, float)
    blotch = ndi.gaussian_filter(rng.standard_normal(blade.shape), sigma=3.0)
    blotch /= blotch.std() + 1e-12
    return colour * (1.0 + 0.05 * blotch[..., None])


def compose(background, leaves, *, light, shadow_offset=(3, 4), shadow_strength=0.3,
            blur=0.8, noise=3.0, rng):
    """Lay leaves on the background, add a soft shadow, light, blur and noise.

    ``leaves`` is a list of ``(mask, colour)``; later leaves lie on top.
    Returns the float picture (0..255 scale) and the union mask.
    """
    truth = np.zeros(background.shape[:2], bool)
    for mask, _ in leaves:
        truth |= mask
    shadow = ndi.shift(truth.astype(float), shadow_offset, order=0)
    shadow = ndi.gaussian_filter(shadow, sigma=3.0)
    picture = background * (1.0 - shadow_strength * shadow)[..., None]
    for mask, colour in leaves:
        picture = np.where(mask[..., None], colour, picture)
    picture = picture * light[..., None]
    picture = ndi.gaussian_filter(picture, sigma=(blur, blur, 0.0))
    picture = picture + noise * rng.standard_normal(picture.shape)
    return picture, truth


def to_uint8(picture):
    return np.rint(np.clip(picture, 0.0, 255.0)).astype(np.uint8)


def to_gray(picture):
    """Luma of an RGB picture (ITU-R BT.601 weights)."""
    return picture @ np.array([0.299, 0.587, 0.114])


# --------------------------------------------------------------------------- scenes
# Each scene returns (picture array, truth mask, suffix). Sizes stay at or below 320 px.


def scene_oak_gray(rng):
    """One lobed leaf on fibre paper, scanned in gray under a lamp off to the left."""
    shape = (224, 256)
    blade, stalk, u, v = lobed_leaf(shape, centre=(118, 132), radius=78, angle=-1.2,
                                    lobes=7, lobe_depth=0.35, stalk=16)
    paper = fibre_paper(shape, rng, base=(232, 226, 210), strength=5.0)
    colour = leaf_colour(blade, u, v, rng, tip=(70, 110, 45), base=(95, 120, 50),
                         vein=(150, 165, 110))
    picture, truth = compose(paper, [(blade, colour), (stalk, np.full(shape + (3,), 90.0))],
                             light=lamp(shape, centre=(80, -40), falloff=0.45), rng=rng,
                             noise=3.0)
    return to_uint8(to_gray(picture)), truth, ".png"


def scene_willow_pair(rng):
    """Two narrow toothed leaves, crossing slightly, on cream paper (colour)."""
    shape = (240, 240)
    a_blade, a_stalk, au, av = lance_leaf(shape, centre=(100, 110), length=180, width=38,
                                          angle=0.6, teeth=14, tooth_depth=0.08, stalk=14)
    b_blade, b_stalk, bu, bv = lance_leaf(shape, centre=(150, 140), length=150, width=34,
                                          angle=-0.35, teeth=12, tooth_depth=0.08, stalk=12)
    paper = fibre_paper(shape, rng, base=(238, 232, 214), strength=4.0)
    a_col = leaf_colour(a_blade, au, av, rng, tip=(60, 120, 60), base=(80, 135, 60),
                        vein=(160, 190, 130))
    b_col = leaf_colour(b_blade, bu, bv, rng, tip=(85, 130, 50), base=(105, 140, 55),
                        vein=(170, 195, 125))
    stalk_col = np.full(shape + (3,), 1.0) * np.array([110.0, 125.0, 70.0])
    picture, truth = compose(
        paper,
        [(a_blade, a_col), (a_stalk, stalk_col), (b_blade, b_col), (b_stalk, stalk_col)],
        light=lamp(shape, centre=(120, 120), falloff=0.5), rng=rng, noise=3.0)
    return to_uint8(picture), truth, ".png"


def scene_sprig_trio(rng):
    """Three small leaves with long stalks, scattered (colour)."""
    shape = (208, 288)
    leaves = []
    paper = fibre_paper(shape, rng, base=(236, 230, 216), strength=4.0)
    stalk_col = np.full(shape + (3,), 1.0) * np.array([95.0, 110.0, 60.0])
    for centre, length, width, angle, tip, base in [
        ((60, 70), 90, 40, 0.3, (55, 115, 55), (75, 125, 55)),
        ((140, 150), 100, 44, -2.4, (70, 125, 50), (90, 135, 55)),
        ((70, 225), 80, 36, 1.9, (60, 105, 45), (85, 120, 50)),
    ]:
        blade, stalk, u, v = lance_leaf(shape, centre=centre, length=length, width=width,
                                        angle=angle, teeth=0, stalk=22, stalk_width=2.5)
        colour = leaf_colour(blade, u, v, rng, tip=tip, base=base, vein=(150, 180, 120),
                             n_side_veins=5)
        leaves += [(blade, colour), (stalk, stalk_col)]
    picture, truth = compose(paper, leaves, light=lamp(shape, centre=(0, 288), falloff=0.6),
                             rng=rng, noise=3.5)
    return to_uint8(picture), truth, ".png"


def scene_maple_on_mat(rng):
    """A red-brown maple-like leaf laid on a woven mat: a textured background."""
    shape = (256, 256)
    blade, stalk, u, v = lobed_leaf(shape, centre=(124, 128), radius=92, angle=-1.57,
                                    lobes=5, lobe_depth=0.45, stalk=20, stalk_width=3.0)
    mat = woven_mat(shape, rng, light=(200, 190, 160), dark=(120, 110, 85))
    colour = leaf_colour(blade, u, v, rng, tip=(175, 60, 35), base=(150, 55, 30),
                         vein=(200, 120, 80), n_side_veins=5)
    picture, truth = compose(mat, [(blade, colour), (stalk, np.full(shape + (3,), 1.0)
                                                     * np.array([140.0, 70.0, 40.0]))],
                             light=lamp(shape, centre=(128, 128), falloff=0.3), rng=rng,
                             noise=4.0)
    return to_uint8(picture), truth, ".png"


def scene_birch_shaded(rng):
    """One broad toothed leaf under strong, smooth, one-sided lamp light (colour)."""
    shape = (240, 256)
    blade, stalk, u, v = lance_leaf(shape, centre=(120, 130), length=170, width=120,
                                    angle=2.6, teeth=18, tooth_depth=0.05, stalk=18,
                                    stalk_width=3.0)
    paper = fibre_paper(shape, rng, base=(240, 236, 222), strength=3.0)
    colour = leaf_colour(blade, u, v, rng, tip=(95, 150, 60), base=(110, 155, 65),
                         vein=(175, 205, 140), n_side_veins=9)
    picture, truth = compose(paper, [(blade, colour), (stalk, np.full(shape + (3,), 1.0)
                                                       * np.array([120.0, 135.0, 70.0]))],
                             light=0.96 * lamp(shape, centre=(0, 0), falloff=0.5,
                                               tilt=(-0.05, -0.08)),
                             rng=rng, noise=3.0)
    return to_uint8(picture), truth, ".png"


def scene_beech_velvet(rng):
    """Two pale autumn leaves on dark velvet: light objects on a dark ground (colour)."""
    shape = (224, 288)
    a_blade, a_stalk, au, av = lance_leaf(shape, centre=(105, 90), length=150, width=80,
                                          angle=-0.5, teeth=10, tooth_depth=0.05, stalk=12)
    b_blade, b_stalk, bu, bv = lance_leaf(shape, centre=(120, 205), length=130, width=70,
                                          angle=1.9, teeth=9, tooth_depth=0.05, stalk=12)
    cloth = velvet(shape, rng, base=(38, 30, 48))
    a_col = leaf_colour(a_blade, au, av, rng, tip=(215, 165, 70), base=(200, 140, 60),
                        vein=(230, 200, 130))
    b_col = leaf_colour(b_blade, bu, bv, rng, tip=(190, 120, 55), base=(175, 105, 50),
                        vein=(220, 170, 110))
    stalk_col = np.full(shape + (3,), 1.0) * np.array([160.0, 110.0, 60.0])
    picture, truth = compose(
        cloth,
        [(a_blade, a_col), (a_stalk, stalk_col), (b_blade, b_col), (b_stalk, stalk_col)],
        light=lamp(shape, centre=(112, 144), falloff=0.6), shadow_strength=0.0, rng=rng,
        noise=3.0)
    return to_uint8(picture), truth, ".png"


def scene_ivy_nir(rng):
    """Two lobed leaves scanned in near-infrared, stored as 16-bit gray TIFF.

    Leaves reflect near-infrared light strongly, so here they are *brighter* than the
    paper, the reverse of the visible-light scans.
    """
    shape = (224, 256)
    a_blade, a_stalk, _, _ = lobed_leaf(shape, centre=(100, 85), radius=60, angle=0.4,
                                        lobes=3, lobe_depth=0.4, stalk=14)
    b_blade, b_stalk, _, _ = lobed_leaf(shape, centre=(125, 180), radius=55, angle=-2.2,
                                        lobes=5, lobe_depth=0.3, stalk=14)
    paper = fibre_paper(shape, rng, base=(90.0,), strength=2.0)
    leaf = np.full(shape + (1,), 175.0) + 6.0 * ndi.gaussian_filter(
        rng.standard_normal(shape), 2.0)[..., None]
    picture, truth = compose(
        paper, [(a_blade, leaf), (a_stalk, leaf), (b_blade, leaf), (b_stalk, leaf)],
        light=lamp(shape, centre=(112, 128), falloff=0.7), shadow_strength=0.15, rng=rng,
        noise=2.0)
    picture16 = np.rint(np.clip(picture[..., 0] * 256.0, 0.0, 65535.0)).astype(np.uint16)
    return picture16, truth, ".tif"


def scene_rowan_noisy(rng):
    """A pinnate sprig (small leaflets along a stalk) in a grainy low-light gray scan."""
    shape = (256, 224)
    paper = fibre_paper(shape, rng, base=(215, 210, 198), strength=4.0)
    leaves = []
    rachis, _, _, _ = lance_leaf(shape, centre=(128, 112), length=220, width=5, angle=1.57)
    leaves.append((rachis, np.full(shape + (3,), 1.0) * np.array([90.0, 100.0, 60.0])))
    for k in range(5):
        y = 45 + 40 * k
        for side in (-1, 1):
            blade, _, u, v = lance_leaf(shape, centre=(y, 112 + side * 30), length=58,
                                        width=22, angle=(0.0 if side > 0 else np.pi) - 0.25 * side,
                                        teeth=6, tooth_depth=0.1)
            colour = leaf_colour(blade, u, v, rng, tip=(60, 100, 50), base=(70, 105, 50),
                                 vein=(120, 150, 100), n_side_veins=4)
            leaves.append((blade, colour))
    picture, truth = compose(paper, leaves, light=lamp(shape, centre=(128, 112), falloff=0.8),
                             rng=rng, noise=9.0)
    return to_uint8(to_gray(picture)), truth, ".png"


SCENES = {
    "oak_gray": scene_oak_gray,
    "willow_pair": scene_willow_pair,
    "sprig_trio": scene_sprig_trio,
    "maple_on_mat": scene_maple_on_mat,
    "birch_shaded": scene_birch_shaded,
    "beech_velvet": scene_beech_velvet,
    "ivy_nir": scene_ivy_nir,
    "rowan_noisy": scene_rowan_noisy,
}

#: The picture given a drawn seed marker (see ``seed_marker``).
SEEDED_SCENE = "sprig_trio"


def seed_marker(truth, rng):
    """A hand-drawn-looking trimap: short white strokes inside the leaves, black strokes
    on the paper, mid-gray (unknown) elsewhere (as :func:`segcut.io.read_seeds` reads)."""
    marker = np.full(truth.shape, 128, np.uint8)
    inside = ndi.binary_erosion(truth, iterations=6)
    outside = ~ndi.binary_dilation(truth, iterations=10)
    for region, value, count in ((inside, 255, 3), (outside, 0, 6)):
        ys, xs = np.nonzero(region)
        picks = rng.choice(ys.size, size=count, replace=False)
        for i in np.sort(picks):
            stroke = np.zeros(truth.shape, bool)
            y, x = ys[i], xs[i]
            stroke[max(0, y - 1) : y + 2, max(0, x - 6) : x + 7] = True
            marker[stroke & region] = value
    return marker


def generate(out: Path) -> list:
    """Write every scene under ``out``; return the relative paths written, in order."""
    written = []
    for index, (name, scene) in enumerate(SCENES.items()):
        rng = np.random.default_rng([SEED, index])
        picture, truth, suffix = scene(rng)
        image_path = out / "images" / f"{name}{suffix}"
        truth_path = out / "truth" / f"{name}.png"
        write_image(picture, image_path, channel_axis=-1 if picture.ndim == 3 else None)
        write_mask(truth, truth_path)
        written += [image_path, truth_path]
        if name == SEEDED_SCENE:
            marker_path = out / "seeds" / f"{name}.png"
            write_image(seed_marker(truth, np.random.default_rng([SEED, 99])), marker_path)
            written.append(marker_path)
    return [p.relative_to(out).as_posix() for p in written]


def sha256sums(out: Path, relative_paths) -> str:
    """``sha256sum``-style listing of the files (sorted by path)."""
    lines = []
    for rel in sorted(relative_paths):
        digest = hashlib.sha256((out / rel).read_bytes()).hexdigest()
        lines.append(f"{digest}  {rel}\n")
    return "".join(lines)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=HERE,
                        help="output folder (default: the folder of this script)")
    args = parser.parse_args(argv)
    written = generate(args.out)
    write_text_atomic(args.out / "SHA256SUMS", sha256sums(args.out, written))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
