"""Hostile chain files exported as SPICE decks run nothing in ngspice but the analysis.

A SPICE deck is a program: ngspice (Debian package ``ngspice``) runs ``.control`` blocks and
their ``shell`` command from any line, and reads a comment line that starts ``*#`` as a
control line (ngspice manual, "Control lines" / interactive interpreter; from memory for the
``*#`` form).  Every string a chain file can carry into a deck (title, path, knob names,
stage and element names, node names) is tried here with line breaks of every kind; each
deck is exported with the real CLI and run with the real ``ngspice -b``.  Passing means:
the marker file the payload would create does not exist, ngspice ran the DC sweep, and the
payload text never starts a line of the deck.
"""

from __future__ import annotations

import subprocess
from pathlib import Path

import pytest

from livecurve.circuit.spice import check_deck, comment
from livecurve.errors import SolverError
from tests.conftest import require_exe, run_cli

BREAKS = ["\n", "\r", "\r\n", "\u2028", "\u0085", "\x0b", "\x0c"]

BASE = """
title = {title}
notes = {notes}
space = "ypbpr"
[[stage]]
id = "gain"
kind = "inverting_gain"
r_in = "10k"
r_f = "10k"
[live.{knob}]
target = "gain.r_f"
min = "5k"
max = "20k"
"""

NETLIST = """
title = "netlist"
space = "ypbpr"
[[stage]]
id = "net"
kind = "netlist"
elements = [{elements}]
[stage.models.dm]
type = "diode"
"""


def _toml_str(s: str) -> str:
    """A TOML basic string holding *s* exactly (escapes every control character)."""
    out = []
    for c in s:
        if c in '"\\':
            out.append("\\" + c)
        elif ord(c) < 0x20 or ord(c) == 0x7F or c in "\u0085\u2028\u2029":
            out.append(f"\\u{ord(c):04x}")
        else:
            out.append(c)
    return '"' + "".join(out) + '"'


def _payload(marker: Path, br: str) -> str:
    return (f"X{br}.control{br}shell touch {marker}{br}.endc{br}*#shell touch {marker}{br}"
            f".include /etc/passwd{br}")


def _export(tmp_path: Path, chain_text: str, name: str = "deck.cir"):
    chain = tmp_path / "chain.toml"
    chain.write_text(chain_text, encoding="utf-8")
    deck = tmp_path / name
    run = run_cli("export", chain, "--spice", deck, "--points", 5, cwd=tmp_path, timeout=300)
    return run, deck


def _run_ngspice(deck: Path) -> str:
    ngspice = require_exe("ngspice")
    proc = subprocess.run([ngspice, "-b", str(deck)], capture_output=True, text=True,
                          timeout=120, cwd=deck.parent)
    return proc.stdout + proc.stderr


@pytest.mark.parametrize("br", BREAKS, ids=[f"U+{ord(b[-1]):04X}" for b in BREAKS])
def test_title_and_notes_cannot_start_a_line(tmp_path, br):
    marker = tmp_path / "PWNED"
    text = BASE.format(title=_toml_str(_payload(marker, br)),
                       notes=_toml_str(_payload(marker, br)), knob="k")
    run, deck = _export(tmp_path, text)
    assert run.returncode == 0, run.stderr
    lines = deck.read_text().split("\n")
    assert not any(ln.startswith((".control", "shell", "*#", ".include")) for ln in lines), \
        lines[:4]
    out = _run_ngspice(deck)
    assert not marker.exists(), "ngspice ran a command from the chain file"
    # the DC sweep itself ran: ngspice printed the out0 column (5 points)
    assert "v(out0)" in out.lower(), out[-1500:]


def test_knob_name_cannot_start_a_line(tmp_path):
    marker = tmp_path / "PWNED"
    knob = _toml_str(_payload(marker, "\n"))
    run, deck = _export(tmp_path, BASE.format(title='"t"', notes='""', knob=knob))
    if run.returncode != 0:          # refused as a bad knob name: also safe
        assert "Traceback" not in run.stderr and run.returncode == 2, run.stderr
        assert not deck.exists()
        return
    assert ".control" not in deck.read_text().split("\n")
    _run_ngspice(deck)
    assert not marker.exists()


REST = ', "R2 sum out 10k", "U1 0 sum out"'


def test_plain_netlist_exports_and_runs(tmp_path):
    """The control case for the refusals below: the same chain with clean names works."""
    run, deck = _export(tmp_path, NETLIST.format(elements='"R1 in sum 10k"' + REST))
    assert run.returncode == 0, run.stderr
    assert "v(out0)" in _run_ngspice(deck).lower()


@pytest.mark.parametrize("card", [
    "R1 in sum(x) 10k",
    "R1 in sum*2 10k",
    "R.control in sum 10k",
    "Rx in {shell} 10k",
    "D1 in sum dm$x",
    "R1 in sum=1 10k",
])
def test_netlist_names_outside_the_grammar_are_refused(tmp_path, card):
    run, deck = _export(tmp_path, NETLIST.format(elements=_toml_str(card) + REST))
    assert run.returncode == 2, (run.returncode, run.stderr)
    assert "Traceback" not in run.stderr
    assert "chain.toml" in run.stderr and "letters, digits and _" in run.stderr, run.stderr
    assert not deck.exists()


def test_payload_after_a_card_comment_is_dropped(tmp_path):
    """Text after ``;`` on an element line is a comment and never reaches the deck."""
    marker = tmp_path / "PWNED"
    card = f"R1 in sum 10k ; .control shell touch {marker}"
    run, deck = _export(tmp_path, NETLIST.format(elements=_toml_str(card) + REST))
    assert run.returncode == 0, run.stderr
    assert "shell" not in deck.read_text()
    _run_ngspice(deck)
    assert not marker.exists()


def test_comment_folds_every_break_and_guards_star_hash():
    for br in BREAKS + ["\u2029", "\x00", "\t"]:
        c = comment(f"a{br}.control")
        assert "\n" not in c and "\r" not in c and c.startswith("* ")
        assert all(" " <= ch <= "~" for ch in c)
    assert comment("#shell x").startswith("* #")  # never "*#"


@pytest.mark.parametrize("line", [
    ".control", "shell touch x", "*#shell touch x", "*nospace", ".include x", "+ continued",
    "R1 a b 1k ; x", "Bx out 0 V = 1 $ y", ".param x=1", ".endc",
])
def test_deck_grammar_refuses_foreign_lines(line):
    deck = "* ok\nVIN vin 0 DC 0\n" + line + "\n.end\n"
    with pytest.raises(SolverError):
        check_deck(deck)


def test_deck_grammar_accepts_what_the_writer_writes():
    from livecurve.circuit.chain import ChainModel
    from livecurve.circuit.spice import chain_deck
    from livecurve.config.chainfile import load_chain
    root = Path(__file__).resolve().parents[2]
    for cfg in sorted((root / "configs").glob("*.toml")):
        text = chain_deck(ChainModel(load_chain(cfg)), points=5, data_file="/tmp/x.txt")
        assert check_deck(text) == text
