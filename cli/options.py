"""Command-line options: number parsers and the one table of options that set config fields.

:data:`CONFIG_OPTIONS` maps each flag to a :class:`segcut.config.SplitConfig` field.
:func:`add_config_options` adds the flags to a parser from it and
:func:`config_overrides` collects the given ones into ``{field: value}`` from the
same table, so a new config option is one new entry here. :func:`guard_extremes`
refuses or lowers settings that cannot work, from options and config files alike.
"""

from __future__ import annotations

import argparse
import math
from dataclasses import dataclass
from typing import Callable

#: Larger superpixel counts are lowered to this, with a warning (the default count is at
#: most 6000; a split's time grows with the count: 100000 took 557 s for six small images).
MAX_SUPERPIXELS = 20_000
#: Below this many superpixels there is nothing to split; smaller values are refused.
MIN_SUPERPIXELS = 8


def number(text: str, cast, *, minimum, strict: bool = False):
    """Parse a finite number >= ``minimum`` (> when ``strict``) for argparse."""
    what = "a whole number" if cast is int else "a number"
    try:
        value = cast(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected {what}, got {text!r}") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"expected a finite number, got {text!r}")
    if value < minimum or (strict and value == minimum):
        wanted = "a positive number" if strict else f"a number >= {minimum:g}"
        raise argparse.ArgumentTypeError(f"expected {wanted}, got {text!r}")
    return value


def positive_float(text: str) -> float:
    return number(text, float, minimum=0.0, strict=True)


def memory_gib(text: str) -> float:
    """A positive number of GiB, or ``inf`` (no limit)."""
    if text.strip().lower() in ("inf", "infinity"):
        return math.inf
    return positive_float(text)


def non_negative_float(text: str) -> float:
    return number(text, float, minimum=0.0)


def finite_float(text: str) -> float:
    return number(text, float, minimum=-math.inf)


def non_negative_int(text: str) -> int:
    return number(text, int, minimum=0)


def positive_int(text: str) -> int:
    return number(text, int, minimum=1)


def superpixel_count(text: str) -> int:
    """A superpixel count: refused below :data:`MIN_SUPERPIXELS` (the upper limit, with its
    warning, is applied by :func:`guard_extremes`)."""
    value = number(text, int, minimum=1)
    if value < MIN_SUPERPIXELS:
        raise argparse.ArgumentTypeError(
            f"expected at least {MIN_SUPERPIXELS} superpixels (fewer cannot outline an "
            f"object), got {text!r}")
    return value


def box(text: str) -> tuple:
    """``X0,Y0,X1,Y1`` in pixels: four whole numbers, x0 < x1 and y0 < y1, none negative."""
    parts = text.split(",")
    try:
        values = tuple(int(p) for p in parts)
    except ValueError:
        values = ()
    if len(values) != 4:
        raise argparse.ArgumentTypeError(
            f"expected X0,Y0,X1,Y1 (four whole numbers), got {text!r}")
    if min(values) < 0:
        raise argparse.ArgumentTypeError(
            f"expected pixel positions >= 0 (0,0 is the top left corner), got {text!r}")
    if not (values[0] < values[2] and values[1] < values[3]):
        raise argparse.ArgumentTypeError(
            f"expected X0 < X1 and Y0 < Y1 (left, top, right, bottom), got {text!r}")
    return values


def prior_names(text: str) -> tuple:
    """``border,center`` -> ("border", "center"); ``none`` or nothing -> ()."""
    if text.strip() in ("", "none"):
        return ()
    return tuple(p.strip() for p in text.split(",") if p.strip())


def _affinity_help() -> str:
    from segcut.affinity import available_affinity_models

    return (f"affinity model: {', '.join(available_affinity_models())} "
            "(default: the config's)")


def _method_help() -> str:
    from segcut.maxcut import available_methods

    names = ["auto", *[n for n in available_methods() if n != "auto"]]
    return f"max-cut method: {', '.join(names)} (default: the config's)"


def _prior_help() -> str:
    from segcut.priors import available_priors

    names = list(available_priors())
    return f"priors, comma-separated: none or any of {', '.join(names)} (default: the config's)"


@dataclass(frozen=True)
class ConfigOption:
    """A command-line option that sets one config field.

    Attributes
    ----------
    flags : tuple of str
        The option's spellings.
    field : str
        The :class:`~segcut.config.SplitConfig` field it sets.
    type : callable
        Parses the text given (argparse ``type``).
    metavar : str
    help : str or callable
        The help text, or a function giving it (for lists of registered names).
    flag : bool
        An on/off switch taking no value: given, it sets the field to True (``type``
        and ``metavar`` are then unused).
    """

    flags: tuple
    field: str
    type: Callable
    metavar: str
    help: object
    flag: bool = False

    @property
    def dest(self) -> str:
        return self.flags[0].lstrip("-").replace("-", "_")

    def help_text(self) -> str:
        return self.help() if callable(self.help) else self.help


#: Every option that sets a config field (the config file gives the rest).
CONFIG_OPTIONS = (
    ConfigOption(("--prior",), "prior", prior_names, "PRIOR", _prior_help),
    ConfigOption(("--box",), "box", box, "X0,Y0,X1,Y1",
                 "a box known to hold the foreground, in pixels (x is the column, 0,0 the top "
                 "left corner; a box reaching outside an image is clipped, and split notes it "
                 "in that image's record)"),
    ConfigOption(("--background-radius",), "background_radius", non_negative_int, "R",
                 "flatten an uneven background first: subtract its grey-level opening (bright "
                 "objects) or closing (dark objects) with a square of half-width R pixels, "
                 "larger than the objects; 0 never flattens (default: decided per image, "
                 "flattening only when it makes the image two clearly separated classes)"),
    ConfigOption(("--superpixels",), "n_superpixels", superpixel_count, "N",
                 f"number of superpixels, {MIN_SUPERPIXELS} to {MAX_SUPERPIXELS} (default: "
                 "chosen from the image size)"),
    ConfigOption(("--affinity",), "affinity", str, "NAME", _affinity_help),
    ConfigOption(("--method",), "method", str, "NAME", _method_help),
    ConfigOption(("--time-limit",), "time_limit", positive_float, "S",
                 "seconds the solver may use per image (results may then depend on the "
                 "machine's speed)"),
    ConfigOption(("--seed",), "seed", non_negative_int, "N",
                 "run seed (default: the config's, 0); each image's seed derives from it and "
                 "the image file's content"),
    ConfigOption(("--confidence",), "confidence", bool, "",
                 "measure how sure each split is (on even without this option, unless the "
                 "config turns it off) and also write each image's confidence map to "
                 "confidence/ beside the masks, named as its mask: 8-bit gray, 255 = certain, "
                 "128 = either side costs the same (TIFF for 3-D stacks)", flag=True),
)

#: Options of :data:`CONFIG_OPTIONS` that only ``segcut split`` takes (they also change
#: what a run writes).
SPLIT_ONLY_OPTIONS = ("--confidence",)


def add_config_options(parser, *, skip=()) -> None:
    """Add the flags of :data:`CONFIG_OPTIONS` (but those named in ``skip``) to ``parser``."""
    for option in CONFIG_OPTIONS:
        if option.flags[0] in skip:
            continue
        if option.flag:
            parser.add_argument(*option.flags, dest=option.dest, action="store_true",
                                default=None, help=option.help_text())
            continue
        parser.add_argument(*option.flags, dest=option.dest, type=option.type, default=None,
                            metavar=option.metavar, help=option.help_text())


def config_overrides(args) -> dict:
    """``{config field: value}`` of the config options given on the command line."""
    changes = {}
    for option in CONFIG_OPTIONS:
        value = getattr(args, option.dest, None)
        if value is not None:
            changes[option.field] = value
    return changes


def guard_extremes(config, *, warn=None):
    """The config with settings that cannot work refused and ruinous ones lowered.

    A superpixel count below :data:`MIN_SUPERPIXELS` raises ``ValueError``; one above
    :data:`MAX_SUPERPIXELS` is lowered to it and ``warn`` (a function taking one line)
    is told. Applies to config files and options alike.
    """
    n = config.n_superpixels
    if n is not None and n < MIN_SUPERPIXELS:
        raise ValueError(f"n_superpixels (--superpixels) must be at least {MIN_SUPERPIXELS} "
                         f"(fewer cannot outline an object); got {n}")
    if n is not None and n > MAX_SUPERPIXELS:
        if warn is not None:
            warn(f"n_superpixels (--superpixels) {n} lowered to {MAX_SUPERPIXELS} (the time of "
                 "a split grows with the count; the default never uses more than 6000)")
        config = config.replace(n_superpixels=MAX_SUPERPIXELS)
    return config


def join_negative_values(argv: list) -> list:
    """``--box -5,0,50,50`` as ``--box=-5,0,50,50``, so the value is not taken for an option
    and the box check can say what is wrong with it."""
    takes_value = {flag for option in CONFIG_OPTIONS if not option.flag
                   for flag in option.flags}
    out, k = [], 0
    while k < len(argv):
        arg = argv[k]
        if arg in takes_value and k + 1 < len(argv) and argv[k + 1].startswith("-") \
                and argv[k + 1][1:2].isdigit():
            out.append(f"{arg}={argv[k + 1]}")
            k += 2
        else:
            out.append(arg)
            k += 1
    return out
