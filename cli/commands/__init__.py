"""One module per subcommand; each exposes a plain function returning an exit code.

The functions never see argparse: :mod:`segcut_cli.main` turns the parsed
arguments into explicit keyword arguments.
"""
