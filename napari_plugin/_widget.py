"""The dock widget: split the chosen image layer, score masks, all in the viewer.

One panel, top to bottom: the input (image, prior, box, seeds), the settings, the
split with its numbers (cut value, bound, gap, foreground share, what decided the
side), and the scoring of Labels layers on the same graph. The work runs in a napari
thread worker, so the viewer stays responsive; every failure becomes a one-line
notification.
"""

from __future__ import annotations

from pathlib import Path

import napari.layers
import numpy as np
from napari.qt.threading import thread_worker
from napari.utils.notifications import show_error, show_info
from qtpy.QtCore import Qt, Signal
from qtpy.QtWidgets import (
    QCheckBox,
    QComboBox,
    QDoubleSpinBox,
    QFormLayout,
    QGroupBox,
    QHBoxLayout,
    QLabel,
    QListWidget,
    QListWidgetItem,
    QProgressBar,
    QPushButton,
    QSpinBox,
    QTableWidget,
    QTableWidgetItem,
    QVBoxLayout,
    QWidget,
)

import segcut
from segcut.pipeline import STAGES

from ._inputs import (
    PRIORS,
    box_from_shapes,
    image_input,
    image_rng,
    make_config,
    one_line,
    panel_choices,
    seeds_from_layer,
)

__all__ = ["SplitWidget", "format_number", "format_share"]

NO_LAYER = "(none)"
METADATA_KEY = "segcut"

#: How the side rule of a split is shown (``SplitResult.orientation``).
SIDE_RULES = {
    "terminal": "priors or seeds",
    "border_rule": "frame rule (no prior)",
    "no_contrast": "no contrast (empty mask)",
}

#: The stages of a split, in order, as :func:`segcut.split` announces them.
SPLIT_STAGES = STAGES

SCORE_COLUMNS = ("rank", "layer", "cut value", "gap", "agreement", "foreground")


def format_number(value) -> str:
    """A cut value or bound as shown: 10 significant digits, or a dash for None."""
    return "–" if value is None else f"{float(value):.10g}"


def background_text(background) -> str:
    """What a split did to the background, in a few words (its record's ``background``).

    Examples
    --------
    >>> background_text({"radius": 16, "objects": "dark", "rule": "gain"})
    'flattened (radius 16, dark objects)'
    >>> background_text({"radius": 0, "objects": "bright", "rule": "two_cluster"})
    'as given'
    """
    if not background or not background.get("radius"):
        return "as given"
    return f"flattened (radius {background['radius']}, {background['objects']} objects)"


def format_share(value, digits: int = 3) -> str:
    """A fraction in [0, 1] as a percentage, or a dash for None."""
    return "–" if value is None else f"{100.0 * float(value):.{digits}g}%"


def _split_job(array, config, seeds, channel_axis, rng, progress=None):
    """Run in the worker thread: ("ok", result) or ("error", one-line message).

    ``progress`` is handed to :func:`segcut.split` (told each stage as it starts).
    """
    try:
        return ("ok", segcut.split(array, config, seeds=seeds, channel_axis=channel_axis,
                                   rng=rng, progress=progress))
    except Exception as exc:  # noqa: BLE001 - every failure becomes one line in the viewer
        return ("error", one_line(exc))


def _score_job(array, masks, config, seeds, channel_axis, rng):
    """Run in the worker thread: ("ok", ScoreResult) or ("error", one-line message)."""
    try:
        return ("ok", segcut.score(array, masks, config=config, seeds=seeds,
                                   channel_axis=channel_axis, rng=rng))
    except Exception as exc:  # noqa: BLE001
        return ("error", one_line(exc))


class SplitWidget(QWidget):
    """Split an image layer into foreground and background; score Labels layers.

    Parameters
    ----------
    napari_viewer : napari.Viewer
        The viewer whose layers the widget reads and writes (napari passes it).

    Attributes
    ----------
    last_result : segcut.SplitResult or None
        The latest split (kept for the caller; the layer holds the mask).
    last_score : segcut.ScoreResult or None
        The latest scoring.
    busy : bool
        True while a split or a scoring runs.
    stages_seen : list of str
        The stages of the latest split, as :func:`segcut.split` announced them (the
        progress bar shows each one while it runs).
    """

    #: Emitted from the worker thread with each stage of a split; Qt delivers it to the
    #: panel's (main) thread, which updates the progress bar.
    stage_reached = Signal(str)

    def __init__(self, napari_viewer):
        super().__init__()
        self.viewer = napari_viewer
        self.last_result = None
        self.last_score = None
        self.busy = False
        self.worker = None
        self.stages_seen = []
        self.stage_reached.connect(self._show_stage)
        self.base_config = segcut.SplitConfig()
        layout = QVBoxLayout(self)
        layout.addWidget(self._input_group())
        layout.addWidget(self._settings_group())
        layout.addWidget(self._split_group())
        layout.addWidget(self._score_group())
        layout.addStretch(1)
        events = self.viewer.layers.events
        for event in (events.inserted, events.removed, events.moved):
            event.connect(self.refresh_layers)
        events.inserted.connect(self._watch_name)
        for layer in self.viewer.layers:
            layer.events.name.connect(self.refresh_layers)
        self.refresh_layers()

    # -- building the panel ------------------------------------------------------------
    def _input_group(self) -> QGroupBox:
        group = QGroupBox("Input")
        form = QFormLayout(group)
        self.image_choice = QComboBox()
        self.prior_choice = QComboBox()
        self.prior_choice.addItems(list(PRIORS))
        self.box_choice = QComboBox()
        self.box_choice.setToolTip("Shapes layer whose last rectangle holds the object; "
                                   "outside it is background")
        self.seeds_choice = QComboBox()
        self.seeds_choice.setToolTip("Labels layer (1 foreground, 2 background) or Points layer "
                                     "(feature 'seed': foreground or background)")
        self.new_seeds_button = QPushButton("New seeds layer")
        self.new_seeds_button.setToolTip("An empty Labels layer to paint seeds on: "
                                         "1 foreground, 2 background")
        self.new_seeds_button.clicked.connect(self.add_seeds_layer)
        seeds_row = QHBoxLayout()
        seeds_row.addWidget(self.seeds_choice, 1)
        seeds_row.addWidget(self.new_seeds_button)
        form.addRow("image", self.image_choice)
        form.addRow("prior", self.prior_choice)
        form.addRow("box", self.box_choice)
        form.addRow("seeds", seeds_row)
        return group

    def _settings_group(self) -> QGroupBox:
        group = QGroupBox("Settings")
        form = QFormLayout(group)
        self.settings_source = QLabel("defaults")
        self.run_settings_button = QPushButton("From the run")
        self.run_settings_button.setToolTip("Take every setting from the run folder the image "
                                            "layer was opened from (its run.toml)")
        self.run_settings_button.clicked.connect(self.use_run_settings)
        self.default_settings_button = QPushButton("Defaults")
        self.default_settings_button.clicked.connect(
            lambda: self.set_settings(segcut.SplitConfig(), "defaults"))
        source_row = QHBoxLayout()
        source_row.addWidget(self.settings_source, 1)
        source_row.addWidget(self.run_settings_button)
        source_row.addWidget(self.default_settings_button)
        form.addRow("from", source_row)
        self.superpixels = _spin_box(0, 100000, 0, special="auto")
        self.affinity = QComboBox()
        self.affinity.addItems(_affinity_names())
        self.affinity.setCurrentText("colour")
        self.prior_strength = QDoubleSpinBox()
        self.prior_strength.setRange(0.0, 1000.0)
        self.prior_strength.setValue(2.0)
        self.random_seed = _spin_box(0, 2**31 - 1, 0)
        self.random_seed.setToolTip("For a layer read from a file, each image's seed comes from "
                                    "this one and the file's content, as on the command line")
        self.fill_holes = QCheckBox()
        self.min_region_size = _spin_box(0, 10**9, 0)
        self.background_radius = _spin_box(-1, 100000, -1, special="auto")
        self.background_radius.setToolTip(
            "Flatten an uneven background first (shading, small nuclei inside large cells): "
            "half-width in pixels of the square its estimate is taken with, larger than the "
            "objects; 0 never flattens; auto flattens only when that makes two clear classes")
        form.addRow("background radius", self.background_radius)
        form.addRow("superpixels", self.superpixels)
        form.addRow("edge weights", self.affinity)
        form.addRow("prior strength", self.prior_strength)
        form.addRow("random seed", self.random_seed)
        form.addRow("fill holes", self.fill_holes)
        form.addRow("smallest region (pixels)", self.min_region_size)
        return group

    def _split_group(self) -> QGroupBox:
        group = QGroupBox("Split")
        form = QFormLayout(group)
        self.split_button = QPushButton("Split")
        self.split_button.clicked.connect(self.run_split)
        self.progress = QProgressBar()
        self.progress.setRange(0, 0)
        self.progress.setVisible(False)
        form.addRow(self.split_button)
        form.addRow(self.progress)
        self.numbers = {}
        for name in ("cut value", "bound", "gap", "foreground", "side decided by", "hypothesis",
                     "background"):
            label = QLabel("–")
            label.setTextInteractionFlags(Qt.TextSelectableByMouse)
            self.numbers[name] = label
            form.addRow(name, label)
        return group

    def _score_group(self) -> QGroupBox:
        group = QGroupBox("Score masks")
        box = QVBoxLayout(group)
        box.addWidget(QLabel("Labels layers to score on the image's graph:"))
        self.mask_list = QListWidget()
        self.mask_list.setMaximumHeight(90)
        box.addWidget(self.mask_list)
        self.score_button = QPushButton("Score")
        self.score_button.clicked.connect(self.run_score)
        box.addWidget(self.score_button)
        self.score_bound = QLabel("bound: –")
        box.addWidget(self.score_bound)
        self.score_table = QTableWidget(0, len(SCORE_COLUMNS))
        self.score_table.setHorizontalHeaderLabels(list(SCORE_COLUMNS))
        self.score_table.verticalHeader().setVisible(False)
        self.score_table.setMinimumHeight(120)
        box.addWidget(self.score_table)
        return group

    # -- layers --------------------------------------------------------------------------
    def _layers_of(self, *kinds) -> list:
        classes = tuple(getattr(napari.layers, kind) for kind in kinds)
        return [layer for layer in self.viewer.layers if isinstance(layer, classes)]

    def _watch_name(self, event) -> None:
        event.value.events.name.connect(self.refresh_layers)

    def refresh_layers(self, event=None) -> None:
        """Fill the layer choices from the viewer, keeping the current choices."""
        _fill(self.image_choice, [layer.name for layer in self._layers_of("Image")])
        _fill(self.box_choice, [NO_LAYER] + [layer.name for layer in self._layers_of("Shapes")])
        _fill(self.seeds_choice,
              [NO_LAYER] + [layer.name for layer in self._layers_of("Labels", "Points")
                            if not _is_result(layer)])
        checked = set(self.checked_masks())
        self.mask_list.clear()
        for layer in self._layers_of("Labels"):
            item = QListWidgetItem(layer.name)
            item.setFlags(item.flags() | Qt.ItemIsUserCheckable)
            item.setCheckState(Qt.Checked if layer.name in checked else Qt.Unchecked)
            self.mask_list.addItem(item)

    def checked_masks(self) -> list:
        """Names of the Labels layers ticked for scoring."""
        return [self.mask_list.item(k).text() for k in range(self.mask_list.count())
                if self.mask_list.item(k).checkState() == Qt.Checked]

    def set_checked_masks(self, names) -> None:
        """Tick exactly the Labels layers called ``names`` for scoring."""
        names = set(names)
        for k in range(self.mask_list.count()):
            item = self.mask_list.item(k)
            item.setCheckState(Qt.Checked if item.text() in names else Qt.Unchecked)

    def _layer(self, name):
        return None if name in ("", NO_LAYER) or name not in self.viewer.layers \
            else self.viewer.layers[name]

    def add_seeds_layer(self) -> None:
        """Add an empty seeds Labels layer over the chosen image and choose it."""
        image_layer = self._layer(self.image_choice.currentText())
        if image_layer is None:
            show_error("segcut: choose an image layer first")
            return
        shape = image_input(image_layer).spatial_shape
        layer = self.viewer.add_labels(np.zeros(shape, dtype=np.uint8),
                                       name=f"{image_layer.name} seeds",
                                       scale=image_layer.scale, translate=image_layer.translate)
        layer.selected_label = 1
        layer.mode = "paint"
        self.seeds_choice.setCurrentText(layer.name)

    # -- settings ------------------------------------------------------------------------
    def set_settings(self, config: segcut.SplitConfig, source: str) -> None:
        """Show ``config`` in the panel; options the panel has no field for come from it too."""
        choices = panel_choices(config)
        self.base_config = config
        self.settings_source.setText(source)
        self.prior_choice.setCurrentText(choices["prior"])
        self.superpixels.setValue(int(choices["n_superpixels"]))
        if self.affinity.findText(choices["affinity"]) < 0:
            self.affinity.addItem(choices["affinity"])
        self.affinity.setCurrentText(choices["affinity"])
        self.prior_strength.setValue(float(choices["prior_strength"]))
        self.random_seed.setValue(int(choices["seed"]))
        self.fill_holes.setChecked(bool(choices["fill_holes"]))
        self.min_region_size.setValue(int(choices["min_region_size"]))
        self.background_radius.setValue(int(choices["background_radius"]))

    def use_run_settings(self) -> None:
        """Take the settings of the run folder the chosen image layer was opened from."""
        layer = self._layer(self.image_choice.currentText())
        meta = {} if layer is None else layer.metadata.get(METADATA_KEY) or {}
        try:
            if not meta.get("config"):
                raise ValueError(f"image layer {getattr(layer, 'name', '')!r} was not opened "
                                 "from a segcut run folder")
            folder = meta.get("run_folder", "run folder")
            self.set_settings(segcut.SplitConfig.from_toml(meta["config"]),
                              f"run {Path(folder).name}")
        except (ValueError, TypeError, segcut.SegcutError) as exc:
            show_error(f"segcut: {one_line(exc)}")

    # -- the inputs of a run -------------------------------------------------------------
    def current_config(self, box=None) -> segcut.SplitConfig:
        """The config of the panel's choices (``box`` from the box layer, if any)."""
        return make_config(base=self.base_config, prior=self.prior_choice.currentText(), box=box,
                           n_superpixels=self.superpixels.value(),
                           affinity=self.affinity.currentText(),
                           prior_strength=self.prior_strength.value(),
                           fill_holes=self.fill_holes.isChecked(),
                           min_region_size=self.min_region_size.value(),
                           seed=self.random_seed.value(),
                           background_radius=self.background_radius.value())

    def _gather(self):
        """(image layer, ImageInput, config, seeds) of the panel; ValueError if unusable."""
        image_layer = self._layer(self.image_choice.currentText())
        if image_layer is None:
            raise ValueError("choose an image layer")
        pixels = image_input(image_layer)
        box_layer = self._layer(self.box_choice.currentText())
        box = None if box_layer is None else box_from_shapes(box_layer, image_layer,
                                                               pixels.spatial_shape)
        seeds = seeds_from_layer(self._layer(self.seeds_choice.currentText()), image_layer,
                                 pixels.spatial_shape)
        return image_layer, pixels, self.current_config(box), seeds

    # -- running -------------------------------------------------------------------------
    def _start(self, job, args, on_done, description):
        self.busy = True
        self.split_button.setEnabled(False)
        self.score_button.setEnabled(False)
        self.progress.setVisible(True)
        worker = thread_worker(job, progress={"desc": description}, start_thread=False)(*args)
        worker.returned.connect(on_done)
        worker.errored.connect(lambda exc: show_error(f"segcut: {one_line(exc)}"))
        worker.finished.connect(self._finished)
        self.worker = worker
        worker.start()
        return worker

    def _finished(self) -> None:
        self.busy = False
        self.split_button.setEnabled(True)
        self.score_button.setEnabled(True)
        self.progress.setVisible(False)

    def run_split(self):
        """Split the chosen image with the panel's choices (in a worker thread)."""
        if self.busy:
            return None
        try:
            image_layer, pixels, config, seeds = self._gather()
            rng = image_rng(image_layer, config.seed)
        except (ValueError, TypeError, OSError, segcut.SegcutError) as exc:
            show_error(f"segcut: {one_line(exc)}")
            return None
        self.stages_seen = []
        self.progress.setRange(0, len(SPLIT_STAGES))
        self.progress.setValue(0)
        self.progress.setFormat("starting")
        self.progress.setTextVisible(True)
        return self._start(_split_job, (pixels.array, config, seeds, pixels.channel_axis, rng,
                                        self.stage_reached.emit),
                           lambda outcome: self._show_split(outcome, image_layer, config),
                           "segcut: splitting")

    def _show_stage(self, stage: str) -> None:
        """Show the stage a split has reached (in the panel's thread)."""
        self.stages_seen.append(stage)
        done = SPLIT_STAGES.index(stage) if stage in SPLIT_STAGES else 0
        self.progress.setValue(done)
        self.progress.setFormat(f"{stage} ({done + 1} of {len(SPLIT_STAGES)})")

    def _show_split(self, outcome, image_layer, config) -> None:
        status, payload = outcome
        if status == "error":
            show_error(f"segcut: {image_layer.name}: {payload}")
            return
        result = payload
        self.last_result = result
        record = result.to_record()
        self.numbers["cut value"].setText(format_number(result.value))
        self.numbers["bound"].setText(format_number(result.upper_bound))
        self.numbers["gap"].setText(format_share(result.gap))
        self.numbers["foreground"].setText(format_share(result.foreground_fraction))
        self.numbers["side decided by"].setText(SIDE_RULES.get(result.orientation,
                                                               result.orientation))
        self.numbers["hypothesis"].setText(str(record.get("hypothesis") or "–"))
        self.numbers["background"].setText(background_text(record.get("background")))
        metadata = {METADATA_KEY: {"kind": "split", "image": image_layer.name, "record": record,
                                   "config": config.to_toml()}}
        _put_labels(self.viewer, f"{image_layer.name} split", result.mask.astype(np.uint8),
                    image_layer, metadata)
        for message in result.warnings:
            show_info(f"segcut: {image_layer.name}: {one_line(message)}")

    def run_score(self):
        """Score the ticked Labels layers on the chosen image's graph (in a worker thread)."""
        if self.busy:
            return None
        try:
            image_layer, pixels, config, seeds = self._gather()
            names = self.checked_masks()
            if not names:
                raise ValueError("tick one or more Labels layers to score")
            masks = {}
            for name in names:
                mask = np.asarray(self.viewer.layers[name].data) != 0
                if mask.shape != tuple(pixels.spatial_shape):
                    raise ValueError(f"layer {name!r} has shape {mask.shape}; the image has "
                                     f"{tuple(pixels.spatial_shape)}")
                masks[name] = mask
            rng = image_rng(image_layer, config.seed)
        except (ValueError, TypeError, KeyError, OSError, segcut.SegcutError) as exc:
            show_error(f"segcut: {one_line(exc)}")
            return None
        self.progress.setRange(0, 0)  # busy: scoring announces no stages
        self.progress.setTextVisible(False)
        return self._start(_score_job,
                           (pixels.array, masks, config, seeds, pixels.channel_axis, rng),
                           lambda outcome: self._show_score(outcome, image_layer),
                           "segcut: scoring")

    def _show_score(self, outcome, image_layer) -> None:
        status, payload = outcome
        if status == "error":
            show_error(f"segcut: {image_layer.name}: {payload}")
            return
        self.last_score = payload
        self.score_bound.setText(f"bound: {format_number(payload.upper_bound)}")
        ranking = payload.ranking
        self.score_table.setRowCount(len(ranking))
        for row, m in enumerate(ranking):
            cells = (str(m.rank), m.name, format_number(m.value), format_share(m.gap),
                     format_share(m.agreement), format_share(m.foreground_fraction))
            for col, text in enumerate(cells):
                item = QTableWidgetItem(text)
                item.setFlags(item.flags() & ~Qt.ItemIsEditable)
                self.score_table.setItem(row, col, item)
        self.score_table.resizeColumnsToContents()


def _spin_box(minimum: int, maximum: int, value: int, *, special: str = "") -> QSpinBox:
    box = QSpinBox()
    box.setRange(minimum, maximum)
    box.setValue(value)
    box.setSpecialValueText(special)  # also writes the value into the box's text
    return box


def _affinity_names() -> list:
    try:
        from segcut.affinity import available_affinity_models

        return list(available_affinity_models())
    except Exception:  # noqa: BLE001 - the engine moved it: offer the default only
        return ["colour"]


def _fill(combo: QComboBox, names: list) -> None:
    """Replace a combo box's items, keeping the current name when it is still there."""
    current = combo.currentText()
    combo.blockSignals(True)
    combo.clear()
    combo.addItems(names)
    if current in names:
        combo.setCurrentText(current)
    combo.blockSignals(False)


def _is_result(layer) -> bool:
    return isinstance(layer.metadata.get(METADATA_KEY), dict) and \
        layer.metadata[METADATA_KEY].get("kind") == "split"


def _put_labels(viewer, name, data, image_layer, metadata) -> None:
    """Show ``data`` as the Labels layer ``name``: replace it if it is there, else add it."""
    spatial = data.ndim
    scale = tuple(image_layer.scale)[-spatial:]
    translate = tuple(image_layer.translate)[-spatial:]
    existing = viewer.layers[name] if name in viewer.layers else None
    if existing is not None and _is_result(existing) and existing.data.shape == data.shape:
        existing.data = data
        existing.metadata = metadata
        existing.scale, existing.translate = scale, translate
        existing.refresh()
        return
    if existing is not None and _is_result(existing):
        viewer.layers.remove(existing)
    viewer.add_labels(data, name=name, scale=scale, translate=translate, metadata=metadata)
