"""The one-pass Y′CbCr kernel (livecurve.engine.fused) against the reference path.

The reference path is built here from parts checked elsewhere, with the code conversions
taken from colour-science (an outside implementation of ITU-R BT.709):

    8-bit Y′CbCr codes --colour.YCbCr_to_RGB--> R′G′B′ (rgb chains) or the normalised
    Y′PbPr (ypbpr chains) --> centred volts --FrameEngine.process (tables, or the solver
    per pixel with exact=True)--> volts --output converter (volts_to_codes for R′G′B′,
    colour.RGB_to_YCbCr / the BT.709 code levels for Y′PbPr)--> 8-bit Y′CbCr codes.

"Within the converter's quantisation": the fused kernel rounds the converter's codes
once, as the reference does, so a pixel may differ by one 8-bit code where the two
float paths land either side of a rounding threshold.  Measured here: at most 1 code, on
under 0.1 % of pixels (rgb chains; the ypbpr chain is exact); the tests allow 1 code on
at most 0.5 % of pixels (3 % against the solver per pixel, where the tables' own
interpolation bound adds roundings: measured 1 %).

Chroma siting for 4:2:0 (common practice: the MPEG-2 / H.264 default "left" location,
chroma on even columns and half-way between lines) is re-implemented here in numpy from
the module's description and compared.
"""

from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pytest

from livecurve.config.chainfile import load_chain
from livecurve.engine.fused import FusedChain, sampled_volts
from livecurve.engine.pipeline import FrameEngine
from livecurve.errors import MediaError, SolverError
from livecurve.outputs.demo import chain_path
from livecurve.signal.levels import volts_to_codes

with warnings.catch_warnings():
    warnings.simplefilter("ignore")  # colour-science warns that matplotlib is absent
    import colour

K709 = colour.WEIGHTS_YCBCR["ITU-R BT.709"]
DEMOS = ("film_shoulder", "night_knee", "shadow_crush")
KNOBS = {"film_shoulder": "contrast", "night_knee": "knee_current",
         "shadow_crush": "crush_point"}
H, W = 24, 160


def _picture(seed: int, h: int = H, w: int = W, *, ch: int | None = None,
             cw: int | None = None, sat: float = 1.0):
    """Ramps, edges and noise in legal 8-bit Y′CbCr, chroma of shape (ch, cw)."""
    rng = np.random.default_rng(seed)
    ch, cw = ch or h, cw or w
    x = np.linspace(0, 1, w)[None, :]
    yy = np.linspace(0, 1, h)[:, None]
    y = 16 + 219 * (0.85 * x + 0.15 * yy) + rng.normal(0, 8, (h, w))
    y[:, w // 3:w // 3 + 6] = 235          # a bright bar: sharp edges for the line filters
    xc = np.linspace(0, 1, cw)[None, :]
    yc = np.linspace(0, 1, ch)[:, None]
    cb = 128 + sat * (90 * np.sin(5 * xc + 2 * yc) + rng.normal(0, 5, (ch, cw)))
    cr = 128 - sat * (80 * np.cos(3 * xc * yc + yc) + rng.normal(0, 5, (ch, cw)))
    return tuple(np.clip(np.rint(a), 1, 254).astype(np.uint8) for a in (y, cb, cr))


def _reference(engine: FrameEngine, spec, y, cb, cr, controls=None, *, bits: int = 8,
               legal: bool = True):
    """The reference path on 4:4:4 planes (module docstring); the input codes at *bits*
    bits, legal or full range."""
    codes = np.stack([y, cb, cr], -1).astype(np.float64)
    if spec.space == "rgb":
        rgb = colour.YCbCr_to_RGB(codes, K=K709, in_bits=bits, in_legal=legal, in_int=True)
        v = rgb * 0.7 - 0.35
    else:
        # BT.709 code levels (colour-science's ranges: legal Y′ 16·2^(b−8) … 235·2^(b−8),
        # C 16·2^(b−8) … 240·2^(b−8); full range Y′ 0 … 2^b − 1, C 0.5 … 2^b − 0.5)
        y_lo, y_hi, c_lo, c_hi = colour.models.rgb.ycbcr.ranges_YCbCr(bits, legal, True)
        c_mid, c_span = (c_lo + c_hi) / 2, c_hi - c_lo
        n = np.stack([(codes[..., 0] - y_lo) / (y_hi - y_lo), (codes[..., 1] - c_mid) / c_span,
                      (codes[..., 2] - c_mid) / c_span], -1)
        v = np.stack([n[..., 0] * 0.7 - 0.35, n[..., 1] * 0.7, n[..., 2] * 0.7], -1)
    planes = np.ascontiguousarray(np.moveaxis(v, -1, 0), dtype=np.float32)
    out = engine.process(planes, controls=controls or {})
    if spec.space == "rgb":
        words = volts_to_codes(out, space="rgb", standard="bt709",
                               converter_bits=spec.converter_bits,
                               converter_legal=spec.converter_legal, out_dtype=np.uint16)
        ycc = colour.RGB_to_YCbCr(words / 65535.0, K=K709, out_bits=8, out_legal=True,
                                  out_int=True)
    else:
        o = np.moveaxis(out, 0, -1).astype(np.float64)
        bits = spec.converter_bits
        k = 2.0 ** (bits - 8)
        c = np.stack([16 * k + (o[..., 0] + 0.35) / 0.7 * 219 * k,
                      128 * k + o[..., 1] / 0.7 * 224 * k,
                      128 * k + o[..., 2] / 0.7 * 224 * k], -1)
        c = np.floor(np.clip(c, k, 2 ** bits - 1 - k) + 0.5)      # legal converter codes
        ycc = np.floor(np.clip(c / k, 1, 254) + 0.5)               # to the 8-bit word
    return tuple(np.asarray(ycc[..., i], dtype=np.int64) for i in range(3))


def _assert_close(got, want, what: str, share: float = 0.005):
    for i, name in enumerate(("Y′", "Cb", "Cr")):
        d = np.abs(got[i].astype(np.int64) - want[i])
        assert d.max() <= 1, f"{what} {name}: off by {d.max()} codes"
        assert (d > 0).mean() <= share, f"{what} {name}: {(d > 0).mean():.2%} pixels differ"


def _no_dynamics(spec):
    return dataclasses.replace(spec, stages=tuple(dataclasses.replace(s, dynamics={})
                                                  for s in spec.stages))


def _fused(engine, spec):
    return FusedChain(engine, space=spec.space, standard="bt709",
                      converter_bits=spec.converter_bits, converter_legal=spec.converter_legal)


@pytest.mark.parametrize("name", DEMOS)
@pytest.mark.parametrize("dynamics", [True, False])
@pytest.mark.parametrize("modulated", [False, True])
def test_fused_equals_table_path(name, dynamics, modulated):
    spec = load_chain(chain_path(name))
    if not dynamics:
        spec = _no_dynamics(spec)
    knob = KNOBS[name]
    engine = FrameEngine(spec, modulated=[knob] if modulated else [],
                         pixel_period_s=1 / 74.25e6)
    assert any(r.line_filter is not None for rs in engine.runs for r in rs) == dynamics
    controls = {}
    if modulated:
        ls = spec.live[knob]
        controls[knob] = ls.lo + (ls.hi - ls.lo) * (0.5 + 0.5 * np.sin(np.arange(H) / 3.0))
    y, cb, cr = _picture(3)
    got = _fused(engine, spec).process(y, cb, cr, controls=controls)
    want = _reference(engine, spec, y, cb, cr, controls)
    _assert_close(got, want, f"{name} dynamics={dynamics} modulated={modulated}")
    if spec.space == "ypbpr" and name == "night_knee":
        # Y′ only: untouched chroma goes through a 10-bit legal converter unchanged
        assert np.array_equal(got[1], cb) and np.array_equal(got[2], cr)


@pytest.mark.parametrize("name", DEMOS)
def test_fused_equals_exact_solver(name):
    spec = load_chain(chain_path(name))
    h, w = 6, 48
    # colours inside the R′G′B′ cube: the tables clamp inputs to the chain's sweep, the
    # solver does not, so far out-of-gamut inputs are not a like-for-like comparison
    y, cb, cr = _picture(5, h, w, sat=0.3)
    table = FrameEngine(spec, pixel_period_s=1 / 74.25e6)
    exact = FrameEngine(spec, pixel_period_s=1 / 74.25e6, exact=True)
    got = _fused(table, spec).process(y, cb, cr)
    want = _reference(exact, spec, y, cb, cr)
    # the tables' own bound (≤ 0.05 mV, about 1/16 of a 10-bit code) moves a few converter
    # roundings as well: measured 1 code on 1 % of 288 pixels (film_shoulder); allowed 3 %
    _assert_close(got, want, f"{name} vs the solver per pixel", share=0.03)


def _upsample(c, h, w):
    """Numpy re-statement of the documented 4:2:0 siting: linear, ½·½ across from even
    columns, ¾·¼ down from half-way lines, edges repeated."""
    c = c.astype(np.float64)
    ch, cw = c.shape
    rows = np.arange(h)
    k = rows >> 1
    k2 = np.where(rows % 2 == 0, np.maximum(k - 1, 0), np.minimum(k + 1, ch - 1))
    v = 0.75 * c[k] + 0.25 * c[k2]
    cols = np.arange(w)
    j = cols >> 1
    j2 = np.where(cols % 2 == 0, j, np.minimum(j + 1, cw - 1))
    return 0.5 * (v[:, j] + v[:, j2])


def _downsample(full, ch, cw):
    h, w = full.shape
    rows_a = np.minimum(2 * np.arange(ch), h - 1)
    rows_b = np.minimum(rows_a + 1, h - 1)
    v = 0.5 * (full[rows_a] + full[rows_b])
    j = np.arange(cw)
    return (0.25 * v[:, np.maximum(2 * j - 1, 0)] + 0.5 * v[:, 2 * j]
            + 0.25 * v[:, np.minimum(2 * j + 1, w - 1)])


@pytest.mark.parametrize("h, w", [(24, 160), (13, 41)])
def test_fused_420_rgb_chain_follows_the_documented_siting(h, w):
    spec = load_chain(chain_path("shadow_crush"))
    engine = FrameEngine(spec, pixel_period_s=1 / 74.25e6)
    ch, cw = (h + 1) // 2, (w + 1) // 2
    y, cb, cr = _picture(7, h, w, ch=ch, cw=cw)
    got = _fused(engine, spec).process(y, cb, cr)
    assert got[1].shape == (ch, cw)
    # reference on 4:4:4 chroma upsampled as documented, with float chroma codes
    ub, ur = _upsample(cb, h, w), _upsample(cr, h, w)
    codes = np.stack([y, ub, ur], -1)
    rgb = colour.YCbCr_to_RGB(codes, K=K709, in_bits=8, in_legal=True, in_int=True)
    planes = np.ascontiguousarray(np.moveaxis(rgb * 0.7 - 0.35, -1, 0), dtype=np.float32)
    out = engine.process(planes)
    words = volts_to_codes(out, space="rgb", standard="bt709", converter_bits=10,
                           converter_legal=True, out_dtype=np.uint16)
    # float output is scaled to 0…1 over the 8-bit word: × 255 gives fractional codes
    ycc = colour.RGB_to_YCbCr(words / 65535.0, K=K709, out_bits=8, out_legal=True,
                              out_int=False) * 255.0
    want_y = np.floor(np.clip(ycc[..., 0], 1, 254) + 0.5)
    d = np.abs(got[0] - want_y)
    assert d.max() <= 1 and (d > 0).mean() <= 0.005
    for i, plane in ((1, got[1]), (2, got[2])):
        want = np.floor(np.clip(_downsample(ycc[..., i], ch, cw), 1, 254) + 0.5)
        d = np.abs(plane - want)
        assert d.max() <= 1 and (d > 0).mean() <= 0.01, (i, d.max(), (d > 0).mean())


def test_fused_ypbpr_chain_never_touches_untouched_chroma_on_odd_420():
    spec = load_chain(chain_path("night_knee"))
    engine = FrameEngine(spec, pixel_period_s=1 / 74.25e6)
    h, w = 361, 641                                   # odd 4:2:0: chroma 181 x 321
    y, cb, cr = _picture(9, h, w, ch=181, cw=321)
    got = _fused(engine, spec).process(y, cb, cr)
    assert np.array_equal(got[1], cb) and np.array_equal(got[2], cr)
    # luma as the 4:4:4 path gives it (luma never depends on chroma in a ypbpr chain)
    full = _fused(engine, spec).process(y, np.full((h, w), 128, np.uint8),
                                        np.full((h, w), 128, np.uint8))
    assert np.array_equal(got[0], full[0])


def test_fused_reports_nan_from_the_chain():
    spec = load_chain(chain_path("shadow_crush"))
    engine = FrameEngine(_no_dynamics(spec), pixel_period_s=1 / 74.25e6)
    engine.runs[0][0].table.values[:] = np.nan
    y, cb, cr = _picture(1)
    with pytest.raises(SolverError, match="NaN"):
        _fused(engine, spec).process(y, cb, cr)


def test_fused_follows_a_rebuilt_engine():
    spec = load_chain(chain_path("shadow_crush"))
    engine = FrameEngine(spec, pixel_period_s=1 / 74.25e6)
    fc = _fused(engine, spec)
    y, cb, cr = _picture(2)
    before = [a.copy() for a in fc.process(y, cb, cr)]
    engine.set_live("crush_point", spec.live["crush_point"].hi)
    after = fc.process(y, cb, cr)
    assert not np.array_equal(before[0], after[0])
    _assert_close(after, _reference(engine, spec, y, cb, cr), "after a knob turn")


@pytest.mark.parametrize("bits, legal", [(8, True), (8, False), (10, True), (12, True)])
def test_sampled_volts_match_the_reference_conversion(bits, legal):
    y, cb, cr = _picture(4)
    if bits > 8:
        y, cb, cr = _deep((y, cb, cr), bits, seed=4)
    v = sampled_volts(y, cb, cr, space="rgb", standard="bt709", step=4, in_legal=legal,
                      in_bits=bits)
    codes = np.stack([y, cb, cr], -1)[::4, ::4].astype(np.float64)
    rgb = colour.YCbCr_to_RGB(codes, K=K709, in_bits=bits, in_legal=legal, in_int=True)
    assert np.allclose(v, np.moveaxis(rgb * 0.7 - 0.35, -1, 0), atol=2e-6)


# ---- the line filters across a band's lines (vector lanes) -------------------------------
from livecurve.engine import fused as _f  # noqa: E402  (kernels, tested directly)
from livecurve.engine.dynamics import StageDynamics, discretise  # noqa: E402
from livecurve.engine.linefilters import apply_line_filter  # noqa: E402

T_PIX = 1 / 74.25e6
#: (dynamics, the lane kernel expected to run it; 0 = the line filters' own kernel)
LANE_CASES = {
    "pole": (StageDynamics(gbw_hz=50e6, noise_gain=3.0), 2),
    "resonance": (StageDynamics(f0_hz=10e6, zeta=0.3), 3),
    "pole+resonance": (StageDynamics(gbw_hz=120e6, noise_gain=2.0, f0_hz=18e6, zeta=0.6), 4),
    "pole+slew": (StageDynamics(gbw_hz=50e6, noise_gain=3.0, slew_v_per_us=20.0), 1),
    "slew only": (StageDynamics(slew_v_per_us=150.0), 1),
    "pole+resonance+slew": (StageDynamics(gbw_hz=50e6, noise_gain=3.0, slew_v_per_us=20.0,
                                          f0_hz=12e6, zeta=0.35), 0),
}


def _lane_run(cf, form, rows, blank):
    """The band path of _runs_band: lanes in blocks of _XB samples, states carried."""
    lanes = np.zeros((_f._XB, _f.BAND), np.float32)
    st = np.zeros((4, _f.BAND))
    out = rows.copy()
    w = rows.shape[1]
    for x0 in range(0, w, _f._XB):
        x1 = min(x0 + _f._XB, w)
        lanes[:x1 - x0] = rows[:, x0:x1].T
        _f._lane_filter(cf, form, blank, lanes, x1 - x0, st, x0 == 0)
        out[:, x0:x1] = lanes[:x1 - x0].T
    return out


@pytest.mark.parametrize("name", list(LANE_CASES))
def test_lane_filter_equals_the_line_filter(name):
    # The line filters' own kernel (four interleaved rows, checked against scipy lsim and
    # ngspice in test_engine_dynamics*.py) is the reference; the lane kernels must give
    # the same samples.  Input: steps and full-swing noise, so rate limits engage.
    dyn, form = LANE_CASES[name]
    lf = discretise(dyn, T_PIX)
    assert lf.n_blocks == 1
    assert _f._lane_form(lf.coef[0]) == form
    rng = np.random.default_rng(11)
    w = 1000                                  # not a multiple of the block of samples
    rows = rng.normal(0.0, 0.05, (_f.BAND, w))
    rows[:, 200:400] += 0.7                   # a bar: steps up and down
    rows[3] = rng.uniform(-0.35, 0.35, w)     # a line of full-swing noise
    rows = rows.astype(np.float32)
    blank = float(np.float32(-0.3))
    want = apply_line_filter(rows, lf, blank_level_v=blank)
    if form == 0:
        return                                # runs on the reference kernel itself
    got = _lane_run(lf.coef[0], form, rows, blank)
    # the same float64 arithmetic in the same order: measured bit for bit equal
    assert np.array_equal(got, want)


def test_fused_line_filter_nan_from_a_table_is_reported():
    # NaN can reach a line filter only from a table holding it: the band path then checks
    spec = load_chain(chain_path("shadow_crush"))
    engine = FrameEngine(spec, pixel_period_s=T_PIX)
    assert engine.runs[0][0].line_filter is not None
    engine.runs[0][0].table.values[100:140] = np.nan
    y, cb, cr = _picture(1)
    from livecurve.errors import MediaError
    with pytest.raises(MediaError, match="line filter"):
        _fused(engine, spec).process(y, cb, cr)


@pytest.mark.parametrize("name", DEMOS)
@pytest.mark.parametrize("sub", ["444", "420"])
def test_fused_line_step_runs_only_the_lines_asked_for(name, sub):
    spec = load_chain(chain_path(name))
    engine = FrameEngine(spec, modulated=[KNOBS[name]], pixel_period_s=T_PIX)
    ls = spec.live[KNOBS[name]]
    h, w = 36, 96
    ctl = {KNOBS[name]: ls.lo + (ls.hi - ls.lo) * (0.5 + 0.5 * np.sin(np.arange(h) / 4.0))}
    if sub == "444":
        y, cb, cr = _picture(6, h, w)
    else:
        y, cb, cr = _picture(6, h, w, ch=h // 2, cw=w // 2)
    full = _fused(engine, spec).process(y, cb, cr, controls=ctl)
    out = tuple(np.full_like(a, 7) for a in (y, cb, cr))
    got = _fused(engine, spec).process(y, cb, cr, controls=ctl, out=out, line_step=2)
    # every second line as the full pass makes it (lines are filtered along themselves)
    assert np.array_equal(got[0][::2], full[0][::2])
    assert (got[0][1::2] == 7).all()                  # the others left as they were
    if spec.space == "ypbpr" and name == "night_knee":
        assert np.array_equal(got[1], cb) and np.array_equal(got[2], cr)
    elif sub == "444":
        for i in (1, 2):
            assert np.array_equal(got[i][::2], full[i][::2])
    else:
        # a 4:2:0 chroma line is made from its one run line, not the mean of two: on a
        # picture whose lines are all alike the two are the same
        flat = tuple(np.ascontiguousarray(np.broadcast_to(a[:1], a.shape)) for a in (y, cb, cr))
        want = _fused(engine, spec).process(*flat)
        got = _fused(engine, spec).process(*flat, line_step=2)
        assert np.array_equal(got[0][::2], want[0][::2])
        for i in (1, 2):
            assert np.array_equal(got[i], want[i])
    with pytest.raises(ValueError, match="line_step"):
        _fused(engine, spec).process(y, cb, cr, line_step=0)


# ------------------------------------------------------------------ deeper and full-range input


def _deep(planes, bits: int, seed: int):
    """8-bit planes as *bits*-bit codes (×2^(bits−8)) with the low bits filled at random,
    in uint16 as a 10- or 12-bit decoder hands them over."""
    rng = np.random.default_rng(seed)
    k = 1 << (bits - 8)
    return tuple((a.astype(np.uint16) * k + rng.integers(0, k, a.shape)).astype(np.uint16)
                 for a in planes)


@pytest.mark.parametrize("name", DEMOS)
@pytest.mark.parametrize("bits", [10, 12])
@pytest.mark.parametrize("modulated", [False, True])
def test_fused_takes_10_and_12_bit_planes(name, bits, modulated):
    """10-/12-bit codes (uint16 planes) through the kernel equal the reference path read at
    that depth (colour-science's YCbCr_to_RGB with in_bits), within the converter's
    quantisation; the output is 8-bit."""
    spec = load_chain(chain_path(name))
    knob = KNOBS[name]
    engine = FrameEngine(spec, modulated=[knob] if modulated else [],
                         pixel_period_s=1 / 74.25e6)
    controls = {}
    if modulated:
        ls = spec.live[knob]
        controls[knob] = ls.lo + (ls.hi - ls.lo) * (0.5 + 0.5 * np.cos(np.arange(H) / 2.0))
    y, cb, cr = _deep(_picture(7), bits, seed=bits)
    fc = FusedChain(engine, space=spec.space, standard="bt709",
                    converter_bits=spec.converter_bits, converter_legal=spec.converter_legal,
                    in_bits=bits)
    got = fc.process(y, cb, cr, controls=controls)
    assert all(a.dtype == np.uint8 for a in got)
    want = _reference(engine, spec, y, cb, cr, controls, bits=bits)
    _assert_close(got, want, f"{name} at {bits} bits modulated={modulated}")
    # the low bits matter: the same picture without them comes out differently somewhere
    k = 1 << (bits - 8)
    coarse = fc.process(*((a // k) * k for a in (y, cb, cr)), controls=controls)
    assert any(not np.array_equal(a, b) for a, b in zip(got, coarse, strict=True))


@pytest.mark.parametrize("name", ["film_shoulder", "night_knee"])
def test_fused_takes_full_range_planes(name):
    """Full-range (``pc``, yuvj) 8-bit codes: the same reference read as full range."""
    spec = load_chain(chain_path(name))
    engine = FrameEngine(spec, pixel_period_s=1 / 74.25e6)
    y, cb, cr = (np.clip(a.astype(np.int64) * 255 // 254, 0, 255).astype(np.uint8)
                 for a in _picture(8))
    got = FusedChain(engine, space=spec.space, standard="bt709",
                     converter_bits=spec.converter_bits, converter_legal=spec.converter_legal,
                     in_legal=False).process(y, cb, cr)
    _assert_close(got, _reference(engine, spec, y, cb, cr, legal=False), f"{name} full range")


@pytest.mark.parametrize("bits, legal, codes, want", [
    # BT.709 code levels (REFERENCES.md): 10-bit black 64, white 940, chroma zero 512
    (10, True, (64, 940, 512), (16, 235, 128)),
    (12, True, (256, 3760, 2048), (16, 235, 128)),
    # full range (ITU-T H.273 / colour-science's ranges): Y′ 0…255, chroma zero at 128
    (8, False, (0, 255, 128), (16, 235, 128)),
])
def test_bypass_recodes_deep_and_full_range_planes_to_8_bit_legal(bits, legal, codes, want):
    """With the chain bypassed the source comes out as it is, at the encoder's 8-bit legal
    levels: black to 16, white to 235, zero chroma to 128."""
    spec = load_chain(chain_path("film_shoulder"))
    fc = FusedChain(FrameEngine(spec), space="rgb", standard="bt709", in_legal=legal,
                    in_bits=bits)
    dt = np.uint8 if bits == 8 else np.uint16
    lo, hi, mid = codes
    y = np.array([[lo, hi]], dt)
    c = np.array([[mid, mid]], dt)
    oy, ocb, ocr = fc.passthrough(y, c, c)
    assert oy.tolist() == [[want[0], want[1]]]
    assert ocb.tolist() == [[want[2], want[2]]] and ocr.tolist() == [[want[2], want[2]]]
    # 8-bit legal input is copied untouched
    fc8 = FusedChain(FrameEngine(spec), space="rgb", standard="bt709")
    p = _picture(9)
    assert all(np.array_equal(a, b) for a, b in zip(fc8.passthrough(*p), p, strict=True))


def test_planes_of_the_wrong_type_are_refused():
    spec = load_chain(chain_path("film_shoulder"))
    fc = FusedChain(FrameEngine(spec), space="rgb", standard="bt709", in_bits=10)
    with pytest.raises(MediaError, match="uint16"):
        fc.process(*_picture(1))
