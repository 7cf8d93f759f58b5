"""segcut in napari: split, score and inspect masks in the viewer (optional extra).

Installed as the package ``segcut_napari`` with ``pip install -e ".[napari]"``; napari
finds it through the ``napari.manifest`` entry point (``napari.yaml``). It only calls
segcut's public API (:func:`segcut.split`, :func:`segcut.score`, the readers and
writers); the engine knows nothing of the viewer.

- ``Plugins > Split and score (segcut)``: the dock widget (``segcut_napari._widget.SplitWidget``);
- ``File > Open Folder...`` on a segcut run folder: images, masks and records;
- ``File > Save Selected Layers...`` of a Labels layer as ``.png``/``.tif``: a segcut mask;
- ``File > Open Sample > segcut``: the demo scans of pressed leaves.
"""

__all__: list = []  # the manifest names the modules; importing this package loads no Qt
