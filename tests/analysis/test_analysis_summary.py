"""``livecurve check``: values as written on a schematic, refusals a render would meet,
plausibility warnings, and dynamics figures at the chain's own pixel clock."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from livecurve.analysis.summary import (
    FAR_OUTSIDE_V,
    NOMINAL_V,
    R_PLAUSIBLE_OHM,
    RAIL_MARGIN_V,
    chain_summary,
    dynamics_figures,
    plausibility,
    value_text,
)
from livecurve.cli import main
from livecurve.config.chainfile import load_chain, parse_chain
from livecurve.engine.pipeline import stage_dynamics
from livecurve.errors import ConfigError, MediaError
from livecurve.signal.timing import get_format

ROOT = Path(__file__).resolve().parents[2]
CONFIGS = sorted((ROOT / "configs").glob("*.toml"))


def _chain(tmp_path, text: str, name: str = "c.toml") -> Path:
    p = tmp_path / name
    p.write_text(text)
    return p


GAIN = """
space = "rgb"
{top}
[[stage]]
id = "g"
kind = "inverting_gain"
channels = [0]
{stage}
"""


def test_values_as_written():
    assert value_text(0.955, "") == "0.955"
    assert value_text(50e-6, "A") == "50 µA"
    assert value_text(10e3, "ohm") == "10 kΩ"
    assert value_text(-12.0, "V") == "-12 V"


def test_wiper_and_ranges_in_units():
    text = chain_summary(load_chain(ROOT / "configs" / "night_knee.toml"))
    assert "trim=0.9552" in text and "955.2 m" not in text
    assert "knee.i_ref: 60 µA  (50 µA … 200 µA)" in text
    assert "restore.trim: 0.9552  (0.93 … 1)" in text


def test_pot_values_only_where_there_is_a_pot(tmp_path):
    p = _chain(tmp_path, GAIN.format(top="", stage='r_in = "10k"\nr_f = "22k"'))
    line = next(ln for ln in chain_summary(load_chain(p)).splitlines()
                if ln.strip().startswith("- g "))
    assert "r_in=10 kΩ" in line and "r_f=22 kΩ" in line
    for k in ("v_ref", "r_pot", "r_end", "trim"):
        assert k not in line
    p = _chain(tmp_path, GAIN.format(top="", stage='r_in = "10k"\nr_f = "22k"\nr_off = "47k"'
                                     '\ntrim = 0.4'), "pot.toml")
    line = next(ln for ln in chain_summary(load_chain(p)).splitlines()
                if ln.strip().startswith("- g "))
    assert "r_off=47 kΩ" in line and "trim=0.4" in line and "r_pot=10 kΩ" in line


def test_per_channel_trim_shown_per_channel():
    text = chain_summary(load_chain(ROOT / "configs" / "shadow_crush.toml"))
    trims = re.findall(r"trim=([0-9.]+)", text)
    assert len(trims) == 3 and len(set(trims)) == 2  # channel 2's board is trimmed apart


@pytest.mark.parametrize("fmt", ["576i", "1080p60"])
def test_dynamics_at_the_formats_pixel_clock(tmp_path, fmt):
    src = (ROOT / "configs" / "night_knee.toml").read_text()
    src, n = re.subn(r'(?m)^format = "auto"', f'format = "{fmt}"', src)
    assert n == 1
    p = _chain(tmp_path, src)
    spec = load_chain(p)
    text = chain_summary(spec)
    clock = get_format(fmt).pixel_clock_hz
    dyn = stage_dynamics(spec.stage("restore"))
    want = dynamics_figures(dyn, 1.0 / clock)
    line = next(ln for ln in text.splitlines() if "dynamics:" in ln)
    assert f"rise {want['rise_s'] * 1e9:.1f} ns" in line
    assert f"{clock / 1e6:.4g} MHz pixel clock" in text
    # differs from what the 1080p30 clock gives (the old, fixed 74.25 MHz)
    old = dynamics_figures(dyn, 1 / 74.25e6)
    assert want["rise_s"] != pytest.approx(old["rise_s"], rel=1e-3)


def test_auto_format_says_which_clock():
    text = chain_summary(load_chain(ROOT / "configs" / "film_shoulder.toml"))
    assert "format auto: figures at 1080p30's 74.25 MHz pixel clock" in text


def test_unknown_format_refused_like_render(tmp_path, capsys):
    p = _chain(tmp_path, GAIN.format(top='format = "1080p31"', stage='r_in = "10k"\nr_f = "10k"'))
    with pytest.raises(ConfigError, match=r"c\.toml.*key 'format'.*1080p31.*known"):
        chain_summary(load_chain(p))
    assert main(["check", str(p)]) == 2
    assert "1080p31" in capsys.readouterr().err


def _with_control(source: str) -> str:
    return (GAIN.format(top="", stage='r_in = "10k"\nr_f = "10k"')
            + '[live.gain]\ntarget = "g.r_f"\nmin = "5k"\nmax = "20k"\n'
            + f'[control.wobble]\ndrives = "gain"\nsource = "{source}"\nscale = 1000\n')


@pytest.mark.parametrize("source,err", [("lfo:wobble:2Hz:1V", ConfigError),
                                        ("lfo:sine:2:1V:depth=3", ConfigError),
                                        ("file:no_such.wav", MediaError)])
def test_bad_control_source_refused(tmp_path, capsys, source, err):
    p = _chain(tmp_path, _with_control(source))
    spec = load_chain(p)  # the loader leaves source text to be read when opened …
    with pytest.raises(err, match="control.wobble.source"):
        chain_summary(spec)  # … check reads it as a render would
    assert main(["check", str(p)]) == 2
    assert "wobble" in capsys.readouterr().err


@pytest.mark.parametrize("source", ["clip", "lfo:sine:2Hz:0.5V", "device:7:rate=44100Hz"])
def test_good_control_sources_pass(tmp_path, source):
    text = chain_summary(load_chain(_chain(tmp_path, _with_control(source))))
    assert f"wobble → gain: source {source}" in text


def test_warnings_keep_exit_zero(tmp_path, capsys):
    p = _chain(tmp_path, GAIN.format(top="", stage='r_in = "50m"\nr_f = "2G"'))
    assert main(["check", str(p)]) == 0
    out = capsys.readouterr().out
    assert "WARNINGS (" in out
    assert "resistor RIN = 50 mΩ is outside the plausible 100 mΩ … 1 GΩ" in out
    assert "resistor RF = 2 GΩ" in out


def test_resistor_bounds():
    lo, hi = R_PLAUSIBLE_OHM
    assert (lo, hi) == (0.1, 1e9)
    ok = parse_chain({"space": "rgb", "stage": [{"id": "g", "kind": "inverting_gain",
                                                  "r_in": "0.1", "r_f": "1G",
                                                  "channels": [0]}]})
    # at the bounds: no resistor warning (only the gain's far-outside warning)
    assert not [w for w in plausibility(ok) if "resistor" in w]


def test_stuck_at_a_rail(tmp_path):
    # the tap sits near −10 V: out ≈ 101·vin + 100·10 V → pinned at the +10.5 V limit
    spec = parse_chain({"space": "rgb", "stage": [{"id": "n", "kind": "noninverting_gain",
                                                    "r_g": "1k", "r_f": "100k", "trim": 0.0,
                                                    "channels": [1]}]})
    w = plausibility(spec)
    stuck = [x for x in w if "stuck" in x]
    assert len(stuck) == 1 and "stage 'n' (channel 1" in stuck[0] and "positive" in stuck[0]
    assert "+10.50 V" in stuck[0]
    assert RAIL_MARGIN_V == 0.05


def test_far_outside_legal_range():
    # gain −4: ±350 mV in → ∓1.4 V out, beyond ±(350 + 350) mV
    spec = parse_chain({"space": "rgb", "stage": [{"id": "g", "kind": "inverting_gain",
                                                    "r_in": "10k", "r_f": "40k",
                                                    "channels": [2]}]})
    far = [x for x in plausibility(spec) if "far outside" in x]
    assert len(far) == 1 and "channel 2" in far[0] and "1400 mV" in far[0]
    # gain −1.9: 665 mV, inside the 700 mV threshold
    spec = parse_chain({"space": "rgb", "stage": [{"id": "g", "kind": "inverting_gain",
                                                    "r_in": "10k", "r_f": "19k",
                                                    "channels": [2]}]})
    assert not plausibility(spec)
    assert NOMINAL_V + FAR_OUTSIDE_V == pytest.approx(0.7)


def test_table_bound_above_goal_warns():
    class Engine:
        def summary_rows(self):
            return [{"channel": 0, "stages": ["a", "b"], "knob": None, "table_n": (4096,),
                     "err_v": 2e-4, "build_s": 0.1}]
    spec = load_chain(ROOT / "configs" / "film_shoulder.toml")
    w = plausibility(spec, Engine())
    assert len(w) == 1 and "table ch0 [a+b]" in w[0] and "0.2000 mV" in w[0]
    assert "0.05 mV goal" in w[0]


@pytest.mark.parametrize("config", CONFIGS, ids=lambda p: p.stem)
def test_demo_chains_check_clean(config):
    text = chain_summary(load_chain(config))
    assert text.rstrip().endswith("check: no warnings")
    assert np.all([("955.2 m" not in text), ("e-05" not in text)])


def test_demo_chain_gbw_comment_is_true():
    # night_knee.toml promises "noise gain 21 → about 11.4 MHz closed loop"
    path = ROOT / "configs" / "night_knee.toml"
    m = re.search(r'gbw = "(\d+)MHz"\s+# noise gain (\d+) → about ([\d.]+) MHz closed loop',
                  path.read_text())
    assert m
    gbw, ng, f_cl = float(m.group(1)) * 1e6, int(m.group(2)), float(m.group(3)) * 1e6
    dyn = stage_dynamics(load_chain(path).stage("restore"))
    assert dyn.noise_gain == ng
    assert gbw / ng == pytest.approx(f_cl, abs=0.05e6)  # the comment's rounding
    # the continuous model's −3 dB point is that closed-loop pole
    assert dyn.bandwidth_3db_hz == pytest.approx(gbw / ng, rel=0.01)


def test_file_source_with_audio_passes_and_silent_file_is_refused(tmp_path, monkeypatch):
    from tests.control._wav import write_wav
    write_wav(tmp_path / "beat.wav", np.sin(np.linspace(0, 60, 4800)).astype(np.float32), 48000)
    monkeypatch.chdir("/")  # file: paths resolve beside the chain file
    text = chain_summary(load_chain(_chain(tmp_path, _with_control("file:beat.wav"))))
    assert f"source file:{tmp_path / 'beat.wav'}" in text
    (tmp_path / "empty.wav").write_bytes(b"")
    with pytest.raises(MediaError, match="control.wobble.source"):
        chain_summary(load_chain(_chain(tmp_path, _with_control("file:empty.wav"), "e.toml")))
