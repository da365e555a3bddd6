"""``--help`` stands alone: every argument of every verb has a help line, every verb an
examples epilog, the examples use knobs the demo chains really have, and ``--version``.

Reference: Python's argparse documentation (``RawDescriptionHelpFormatter`` keeps an epilog
as written; ``action="version"`` prints and exits 0) — Python 3.11 standard library docs.
"""

from __future__ import annotations

import argparse
import re
import shlex

import pytest

from livecurve import __version__
from livecurve.cli import build_parser
from livecurve.config.chainfile import load_chain
from tests.conftest import ROOT, run_cli


def _verbs():
    p = build_parser()
    sub = next(a for a in p._actions if isinstance(a, argparse._SubParsersAction))
    return sub.choices


VERBS = sorted(_verbs())


@pytest.mark.parametrize("verb", VERBS)
def test_every_argument_has_help_with_an_example_or_unit(verb):
    parser = _verbs()[verb]
    for act in parser._actions:
        if isinstance(act, argparse._HelpAction):
            continue
        name = "/".join(act.option_strings) or act.dest
        assert act.help and act.help.strip(), f"{verb} {name}: no help text"
        if act.nargs == 0:  # on/off switches say what they do
            continue
        # a value-taking argument shows an example ("e.g.") or lists its choices
        assert "e.g." in act.help or act.choices, f"{verb} {name}: no example: {act.help!r}"


@pytest.mark.parametrize("verb", VERBS)
def test_every_verb_has_an_examples_epilog_kept_as_written(verb):
    parser = _verbs()[verb]
    assert parser.epilog and parser.epilog.startswith("examples:"), verb
    assert parser.formatter_class is argparse.RawDescriptionHelpFormatter
    text = parser.format_help()
    assert f"livecurve {verb}" in text.split("examples:", 1)[1]


def test_examples_name_knobs_the_demo_chains_have():
    # every "--set NAME=..." and "--control NAME=..." in any help text names a knob of a
    # demo chain (an example people copy must work)
    knobs = set()
    for cfg in (ROOT / "configs").glob("*.toml"):
        knobs |= set(load_chain(cfg).live)
    texts = [build_parser().format_help()] + [p.format_help() for p in _verbs().values()]
    used = set()
    for t in texts:
        used |= set(re.findall(r"(?:--set |--control |^|\s)([a-z_]+)=(?:[0-9]|lfo|clip|device)",
                               t, re.M))
    assert used, "no knob examples found"
    assert used <= knobs, f"examples name knobs no demo chain has: {used - knobs}"


def test_epilog_examples_parse():
    # each example line of each epilog is accepted by the parser as written
    for verb, parser in _verbs().items():
        body = parser.epilog.split("examples:", 1)[1].replace("\\\n", " ")
        for line in body.strip().splitlines():
            argv = shlex.split(line.strip())
            assert argv[0] == "livecurve", line
            ns = build_parser().parse_args(argv[1:])
            assert ns.verb == verb


def test_version():
    res = run_cli("--version")
    assert res.returncode == 0
    assert res.stdout.strip() == f"livecurve {__version__}"


def test_top_level_help_lists_exit_statuses():
    res = run_cli("--help")
    assert res.returncode == 0
    assert "exit status" in res.stdout and "128+N" in res.stdout
