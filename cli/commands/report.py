"""``segcut report OUT``: (re)write the HTML report of a run folder."""

from __future__ import annotations

import sys
from pathlib import Path

from ..common import EXIT_OK, UsageError, check_exists, write_json


def report(out, *, as_json=False, stdout=None) -> int:
    """Write ``OUT/report.html`` from the folder's records and overlays; return 0.

    Raises
    ------
    UsageError
        ``out`` does not exist or is not a run folder.
    """
    from segcut.batch import write_report
    from segcut.errors import InputError

    stdout = sys.stdout if stdout is None else stdout
    check_exists(Path(out))
    try:
        path = write_report(out)
    except InputError as err:
        raise UsageError(str(err)) from None
    if as_json:
        write_json(stdout, {"command": "report", "report": str(path)})
    else:
        stdout.write(f"segcut: wrote {path}\n")
    return EXIT_OK
