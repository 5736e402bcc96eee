"""The stage packages are ours alone and every command answers --help."""

import importlib.metadata as md
import subprocess
import sys

import pytest

from tracktrue.cli import build_parser

STAGES = ("tracktrue", "ingest", "features", "models", "dashboard", "synthetic_fleet")


def test_each_top_level_package_belongs_to_our_distribution_alone():
    # Generic names like `models` could collide with another installed
    # distribution (DESIGN.md); the README installs into a project venv.
    # An editable install can list our own metadata twice (the venv's
    # dist-info and the source tree's egg-info): count names, not entries.
    owners = md.packages_distributions()
    for name in STAGES:
        assert set(owners.get(name, [])) == {"tracktrue"}, f"{name} is provided by {owners.get(name)}"


def _subcommands():
    parser = build_parser()
    action = next(a for a in parser._actions if a.dest == "command")
    return sorted(action.choices)


@pytest.mark.parametrize("command", [None, *_subcommands()])
def test_every_command_has_help(command):
    args = [sys.executable, "-m", "tracktrue.cli"] + ([command] if command else []) + ["--help"]
    out = subprocess.run(args, capture_output=True, text=True, timeout=60)
    assert out.returncode == 0, out.stderr
    assert "usage: tracktrue" in out.stdout


def test_python_dash_m_tracktrue_is_the_same_command_line():
    out = subprocess.run([sys.executable, "-m", "tracktrue", "--version"], capture_output=True, text=True, timeout=60)
    assert out.returncode == 0 and out.stdout.startswith("tracktrue "), out.stderr


@pytest.mark.parametrize("command", [["features"], ["score"], ["rank"], ["vehicle", "V1"], ["evaluate"],
                                     ["snooze", "V1", "--clear"], ["dashboard"]])
def test_a_reading_command_on_a_path_without_a_store_says_so_and_creates_nothing(tmp_path, command, capsys):
    from tracktrue.cli import EXIT_MISSING, main

    where = tmp_path / "typo"
    assert main([*command, "--store", str(where)]) == EXIT_MISSING
    assert f"no store at {where}" in capsys.readouterr().err
    assert not where.exists()
