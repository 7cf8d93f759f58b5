"""``segcut report OUT``: (re)write the HTML report of a run folder."""

from __future__ import annotations

import json
import sys

EXIT_OK = 0


def report(out, *, as_json=False, stdout=None) -> int:
    """Write ``OUT/report.html`` from the folder's records and overlays; return 0."""
    from segcut.batch import write_report

    stdout = sys.stdout if stdout is None else stdout
    path = write_report(out)
    if as_json:
        stdout.write(json.dumps({"report": str(path)}) + "\n")
    else:
        stdout.write(f"segcut: wrote {path}\n")
    return EXIT_OK
