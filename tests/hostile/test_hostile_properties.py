"""Property tests: random values and random TOML fed to the chain loader.  The only outcomes
allowed are a loaded chain or a :class:`~livecurve.errors.LivecurveError` with exit 2 whose
message names the file — never another exception.

Reference: TOML 1.0.0 (toml.io) for the documents tomli-w writes and tomllib reads;
Hypothesis (hypothesis.readthedocs.io) generates the cases and shrinks any failure.
"""

from __future__ import annotations

import copy
import datetime as dt

import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from livecurve.config.chainfile import load_chain, parse_chain
from livecurve.errors import LivecurveError

BASE = {
    "title": "property chain",
    "space": "ypbpr",
    "ambient": "25C",
    "supply": {"v_pos": "12V", "v_neg": "-12V"},
    "sweep": {"from": "-0.5V", "to": "0.5V"},
    "thermal": {"warmup_to": "45C", "tau": "90s"},
    "stage": [
        {"id": "gain", "kind": "inverting_gain", "r_in": "10k", "r_f": "22k"},
        {"id": "knee", "kind": "log_transdiode", "r_in": "10k", "i_ref": "60uA",
         "junction": "diode", "device": {"is": "1e-14", "n": 1.0}},
        {"id": "user", "kind": "netlist", "channels": [0],
         "elements": ["R1 in sum 10k", "R2 sum out 10k", "U1 0 sum out"]},
    ],
    "live": {"k": {"target": "knee.i_ref", "min": "40uA", "max": "200uA"}},
    "control": {"beat": {"drives": "k", "source": "lfo:sine:2Hz:0.5V", "gain": 0.5}},
}

#: Every place a value sits in BASE, as a path of keys / indices.
PATHS = []


def _walk(node, path=()):
    if isinstance(node, dict):
        for k, v in node.items():
            _walk(v, (*path, k))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            _walk(v, (*path, i))
    if path:
        PATHS.append(path)


_walk(BASE)

NUMBER_TEXT = st.builds(
    lambda sign, num, exp, pfx, unit: f"{sign}{num}{exp}{pfx}{unit}",
    st.sampled_from(["", "-", "+"]),
    st.sampled_from(["0", "1", "4k7", "2R2", "1.5", ".5", "1" * 40, "nan", "inf"]),
    st.sampled_from(["", "e9999999", "e-9999999", "e308", "e-330", "E5"]),
    st.sampled_from(["", "k", "meg", "u", "µ", "M", "G", "T", "f", "K", "m"]),
    st.sampled_from(["", "V", "A", "ohm", "Ω", "C", "K", "Hz", "s", "F", "uA", "x"]),
)
SCALARS = st.one_of(
    st.none(), st.booleans(),
    st.integers(min_value=-(10 ** 450), max_value=10 ** 450),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=30), NUMBER_TEXT,
    st.datetimes(min_value=dt.datetime(1, 1, 1), max_value=dt.datetime(9999, 1, 1)),
)
VALUES = st.recursive(SCALARS, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.dictionaries(st.text(max_size=8), inner, max_size=4)),
    max_leaves=12)

SETTINGS = settings(max_examples=150, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.too_slow])


def _assign(raw, path, value):
    node = raw
    for k in path[:-1]:
        node = node[k]
    if value is None:  # TOML has no null: None stands for "remove the key"
        if isinstance(node, dict):
            node.pop(path[-1], None)
        else:
            node.pop(path[-1])
    else:
        node[path[-1]] = value


def _outcome(fn) -> None:
    try:
        fn()
    except LivecurveError as exc:
        assert exc.exit_code == 2, f"{type(exc).__name__} exit {exc.exit_code}: {exc}"
        assert str(exc).strip(), "empty message"


@SETTINGS
@given(st.lists(st.tuples(st.sampled_from(PATHS), VALUES), min_size=1, max_size=3))
def test_random_values_in_a_valid_chain(changes):
    raw = copy.deepcopy(BASE)
    for path, value in changes:
        try:
            _assign(raw, path, value)
        except (KeyError, IndexError, TypeError):
            continue  # an earlier change removed or replaced the parent
    _outcome(lambda: parse_chain(raw, path="random.toml"))


def _toml_safe(v):
    """tomli-w writes no None and needs text keys: drop or convert what it cannot write."""
    if isinstance(v, dict):
        return {str(k): _toml_safe(x) for k, x in v.items() if x is not None}
    if isinstance(v, list):
        return [_toml_safe(x) for x in v if x is not None]
    return v


TOP_KEYS = st.sampled_from(["title", "notes", "space", "standard", "ambient", "format",
                            "supply", "opamp", "converter", "stage", "channel", "live",
                            "sweep", "thermal", "control", "extra"])


@SETTINGS
@given(st.dictionaries(TOP_KEYS, VALUES, max_size=8))
def test_random_toml_documents(tmp_path_factory, doc):
    doc = _toml_safe(doc)
    try:
        text = tomli_w.dumps(doc)
    except (TypeError, ValueError):
        return  # not a TOML document (e.g. mixed-type arrays tomli-w refuses)
    p = tmp_path_factory.mktemp("doc") / "random.toml"
    p.write_text(text, encoding="utf-8")
    _outcome(lambda: load_chain(p))


@SETTINGS
@given(st.binary(max_size=200))
def test_random_bytes(tmp_path_factory, data):
    p = tmp_path_factory.mktemp("bytes") / "noise.toml"
    p.write_bytes(data)
    try:
        load_chain(p)
    except LivecurveError as exc:
        assert exc.exit_code == 2 and str(p) in str(exc)
