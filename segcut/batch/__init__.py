"""Folder runs: many images, one run folder, resumable and safe to kill.

A *run folder* holds everything one configuration produced::

    OUT/
      run.toml        the exact configuration (plus versions, as comments)
      records.jsonl   one JSON object per input (the current result of each)
      summary.csv     one row per input, rewritten at the end of every run
      report.html     the page to look through the results (see :mod:`segcut.report`)
      masks/<output>.png      0 background, 255 foreground (.tif for 3-D stacks, and in
                              tiles for images above max_graph_pixels; the record's
                              and summary's ``mask`` name the file)
      overlays/<output>.png   the foreground shaded and outlined over the image, with a legend

``<output>`` is the input's path relative to the folder it was found in (or its file
name when a file was given directly) without its suffix: sub-folders of the inputs
are mirrored, so ``a/x.jpg`` and ``b/x.jpg`` never collide. Every input gets its own
outputs: inputs that share a name up to the suffix (``x.png``, ``x.jpg``) keep their
suffix (``masks/x.png.png``, ``masks/x.jpg.png``), and inputs of different given
folders that share a relative path are prefixed with their folder's name
(:func:`find_inputs`).

The package is split by responsibility: :mod:`.inputs` (finding, naming, hashing,
seeding inputs), :mod:`.records` (records.jsonl, summary.csv, run.toml),
:mod:`.executors` (one task per image: in process, a process pool or Dask) and
:mod:`.run` (:func:`run_batch`, the report file).

Guarantees
----------
- **Nothing half-written.** Masks, overlays, ``summary.csv``, ``run.toml`` and the
  report are written to a temporary file in the same folder and renamed into place.
  ``records.jsonl`` only ever grows by whole lines written with one ``write`` call;
  a torn last line (a run killed by SIGKILL while the operating system was writing)
  is ignored when the file is read, and the file is compacted (one line per input,
  rewritten atomically) at the start and at the end of every run.
- **Resumable.** An input is skipped when its current record is ``ok`` and has the
  same configuration hash, the same input content hash (SHA-256 of the file) and the
  same seed-file hash, and its mask and overlay exist. ``force=True`` redoes it.
  Failed inputs are tried again. Only inputs that may be skipped are hashed before
  the work starts; the others are hashed by the worker that reads them.
- **One configuration per folder.** A folder whose ``run.toml`` or records carry a
  different configuration hash is refused with a :class:`~segcut.errors.ConfigError`
  naming the folder; nothing in it is changed. ``force=True`` takes it over instead:
  its records are emptied and its ``run.toml`` replaced.
- **Failure isolation.** A bad image becomes a record with ``status = "failed"`` and a
  one-line ``error`` naming the file; the run goes on.
- **Deterministic.** Each image's random seed is derived from the configuration's
  seed and the image's content hash (:func:`image_seed`), never from worker order, so
  a serial run, a process pool and a Dask cluster write the same mask bytes. (A
  solver ``time_limit`` lets the clock decide where a search stops; results then may
  differ between runs.)
- **Inputs are named by their relative path**, so one run folder is meant for one
  collection: running another folder that holds ``x.png`` into the same run folder
  redoes ``x.png`` (its content differs) and replaces its outputs.

Executors
---------
See :mod:`segcut.batch.executors`.

A real cluster: start ``dask scheduler`` on one machine and
``dask worker tcp://HOST:8786 --nworkers N --nthreads 1`` on each of the others (one
thread per worker process: the numba kernels and scikit-image hold the GIL for long
stretches), with the same segcut version installed everywhere and the input and
output folders at the same paths on every machine (a shared file system): workers
read the images and write masks and overlays themselves; only this process writes
``records.jsonl``, ``summary.csv`` and the report.

Memory
------
Peak memory is set by the largest image a worker holds (inputs stream: a worker reads
one image, splits it, writes its outputs and lets it go; the parent keeps only the
small records). Before a local run starts, each input's size is read from its header
and :func:`segcut.batch.memory.estimate_peak_bytes` estimates its peak (a formula
fitted to measured peaks, checked in ``tests/test_batch_memory.py``); the number of
worker processes is lowered so that that many copies of the largest image's estimate
fit in the memory budget: 80% of the memory available at the start, or
``memory_budget`` GiB (``segcut split --memory-budget GIB``). Images above
``max_graph_pixels`` take the large-image path (:mod:`segcut.large`), whose peak
grows by about 23 bytes per pixel instead of about 210 (36 Mpixel RGB: about 1 GiB).
"""

from __future__ import annotations

from ..columns import OUTPUT_COLUMNS, SUMMARY_COLUMNS
from .inputs import InputItem, InputListing, find_inputs, hash_file, image_seed
from .records import load_records, summary_rows
from .run import BatchProgress, BatchSummary, RunInterrupted, run_batch, write_report

__all__ = [
    "InputItem",
    "InputListing",
    "BatchProgress",
    "BatchSummary",
    "OUTPUT_COLUMNS",
    "RunInterrupted",
    "SUMMARY_COLUMNS",
    "find_inputs",
    "hash_file",
    "image_seed",
    "load_records",
    "run_batch",
    "summary_rows",
    "write_report",
]
