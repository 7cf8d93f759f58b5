"""The README documents every command-line option and every config key.

The options come from the parser itself (argparse, the reference for what the command
line accepts); the config keys from the fields of SplitConfig.
"""

from __future__ import annotations

import re
from dataclasses import fields
from pathlib import Path

import pytest

from segcut.config import SplitConfig
from segcut_cli.main import build_parser

README = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")


def _subcommands():
    parser = build_parser()
    action = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
    return action.choices


@pytest.mark.parametrize("command", ["split", "score", "compare", "maxcut", "report"])
def test_every_option_is_in_the_readme(command):
    sub = _subcommands()[command]
    flags = [s for a in sub._actions for s in a.option_strings if s not in ("-h", "--help")]
    assert flags, command
    missing = [f for f in flags if f"`{f}" not in README and f" {f}" not in README]
    assert not missing, f"{command}: options missing from README.md: {missing}"


def test_every_config_key_is_in_the_readme():
    block = README.split("## Configuration", 1)[1].split("```toml", 1)[1].split("```", 1)[0]
    keys = set(re.findall(r"^#?\s*([a-z_]+) =", block, flags=re.M))
    missing = [f.name for f in fields(SplitConfig) if f.name not in keys]
    assert not missing, f"config keys missing from README.md's Configuration block: {missing}"

