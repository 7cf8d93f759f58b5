"""Take the README's picture of the napari widget: a demo scan split and scored.

Run from the project root, under an X server (Mesa's software OpenGL is enough)::

    xvfb-run -a python napari_plugin/screenshot.py            # writes docs/napari_widget.png
    xvfb-run -a python napari_plugin/screenshot.py --out x.png

It opens the ``sprig_trio`` sample with its seed marker, splits it with the widget,
scores the true mask against the split, and saves the whole window.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

DEFAULT_OUT = Path(__file__).resolve().parent.parent / "docs" / "napari_widget.png"


def _wait(widget, app, seconds: float = 300.0) -> None:
    end = time.monotonic() + seconds
    while widget.busy and time.monotonic() < end:
        app.processEvents()
        time.sleep(0.05)
    if widget.busy:
        raise TimeoutError("the widget did not finish in time")


def take_screenshot(out: Path, *, size=(1280, 860)):
    """Open the viewer off screen, run the widget, and save the window as PNG."""
    import napari
    from qtpy.QtWidgets import QApplication

    from segcut.io import write_image

    viewer = napari.Viewer(show=False, title="segcut in napari")
    try:
        viewer.window.resize(*size)
        viewer.open_sample("segcut", "sprig_trio")
        _, widget = viewer.window.add_plugin_dock_widget("segcut", "Split and score")
        app = QApplication.instance()
        widget.image_choice.setCurrentText("sprig_trio")
        widget.seeds_choice.setCurrentText("sprig_trio seeds")
        widget.run_split()
        _wait(widget, app)
        widget.set_checked_masks(["sprig_trio truth", "sprig_trio split"])
        widget.run_score()
        _wait(widget, app)
        viewer.layers.selection = {viewer.layers["sprig_trio split"]}
        app.processEvents()
        picture = viewer.screenshot(canvas_only=False, flash=False)
    finally:
        viewer.close()
    write_image(picture[..., :3], out, channel_axis=-1)
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT, help="PNG file to write")
    args = parser.parse_args(argv)
    args.out.parent.mkdir(parents=True, exist_ok=True)
    try:
        take_screenshot(args.out)
    except Exception as exc:  # noqa: BLE001 - one line, no traceback
        print(f"screenshot: {args.out}: {exc}", file=sys.stderr)
        return 1
    print(f"screenshot: wrote {args.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
