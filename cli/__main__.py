from segcut_cli.main import main

raise SystemExit(main())
