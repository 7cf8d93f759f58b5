"""``python -m segcut``: the command-line front end."""

from segcut_cli.main import main

raise SystemExit(main())
