"""One frame's whole path, shared by render and preview:

decoded R′G′B′ codes → zero-centred channel volts (``signal.levels``) → the chain
(``engine.pipeline``, with control values sampled at each row's or pixel's time on the
video timing) → the output converter and back to R′G′B′ codes.

All buffers are allocated once for the frame size; ``process`` allocates nothing in
steady state apart from the small per-row control arrays.
"""

from __future__ import annotations

import numpy as np

from livecurve.config.chainfile import ChainSpec
from livecurve.config.controls import ControlSpec, default_for_knob
from livecurve.engine.pipeline import FrameEngine
from livecurve.errors import ConfigError
from livecurve.signal.levels import codes_to_volts, volts_to_codes
from livecurve.signal.timing import ClipTiming, get_format, infer_format


def resolve_standard(spec: ChainSpec, clip_matrix: str | None, width: int, height: int) -> str:
    """The chain's colour standard, or (``auto``) the clip's tagged matrix, or the common
    guess for untagged material (BT.709 for HD and larger, else BT.601)."""
    if spec.standard != "auto":
        return spec.standard
    if clip_matrix:
        return clip_matrix
    return "bt709" if width >= 1280 or height >= 720 else "bt601"


def resolve_timing(spec: ChainSpec, width: int, height: int, fps: float) -> ClipTiming:
    """Video timing from the chain file's ``format`` or inferred from the clip.

    A clip at a rate no standard format runs at (e.g. 10 or 12 frames/s) rides on the line
    structure of the progressive 30 frames/s format nearest its height, with the pixel clock
    scaled so the frame rate is the clip's (samples × lines × rate = clock)."""
    if spec.format != "auto":
        return ClipTiming(get_format(spec.format), width, height)
    try:
        fmt = infer_format(width, height, fps)
    except ConfigError:
        import dataclasses
        base = infer_format(width, height, 30.0)
        fmt = dataclasses.replace(
            base, name=f"{base.active_h}p{fps:g} (lines of {base.name})", frame_rate=float(fps),
            pixel_clock_hz=base.samples_per_line * base.lines_per_frame * float(fps))
    return ClipTiming(fmt, width, height)


def bind_controls(spec: ChainSpec, items, *, clip_path=None) -> list:
    """Turn ``--control`` options and the chain's control blocks into (ControlSpec, ControlMap).

    Parameters
    ----------
    items : list of str
        ``NAME=SOURCE`` (NAME a control block or a live knob) or a bare ``SOURCE`` when the
        chain has exactly one control block.  Control blocks with a default ``source`` are
        bound even when no option names them, unless an option drives the same live
        parameter (the explicit option wins).
    """
    from livecurve.control.mapping import ControlMap
    from livecurve.control.spec import parse_source, silent_clip
    chosen: dict[str, ControlSpec] = {}
    for item in items or []:
        name, src = _split_item(item, spec)
        if name in spec.controls:
            cs = spec.controls[name]
            chosen[name] = ControlSpec(**{**cs.__dict__, "source": src})
        elif name in spec.live:
            chosen[name] = default_for_knob(name, spec.live[name], src)
        else:
            raise ConfigError(f"no control block or live parameter '{name}'; controls: "
                              f"{', '.join(spec.controls) or 'none'}; live: "
                              f"{', '.join(spec.live) or 'none'}", key="--control", value=item)
    # a block's default source yields to an option that drives the same knob explicitly
    explicit = {c.drives for c in chosen.values()}
    for name, cs in spec.controls.items():
        if name not in chosen and cs.source and cs.drives not in explicit:
            if _needs_clip(cs.source) and silent_clip(clip_path, control=name):
                continue  # no soundtrack (still, camera, silent clip): the knob keeps its value
            chosen[name] = cs
    drives = [c.drives for c in chosen.values()]
    for d in drives:
        if drives.count(d) > 1:
            raise ConfigError("two controls drive the same live parameter", key="--control",
                              value=d)
    out = []
    for cs in chosen.values():
        src = parse_source(cs.source, clip_path=clip_path)
        out.append((cs, ControlMap(src, gain=cs.gain, offset_v=cs.offset_v,
                                   envelope=cs.envelope, converter=cs.make_converter())))
    return out


def _needs_clip(source: str) -> bool:
    return any(part.strip().split(":")[0] == "clip" for part in source.split("+"))


def _split_item(item: str, spec: ChainSpec) -> tuple[str, str]:
    head, sep, rest = item.partition("=")
    if sep and ":" not in head and head.strip():
        return head.strip(), rest.strip()
    if len(spec.controls) == 1:
        return next(iter(spec.controls)), item.strip()
    raise ConfigError("write --control NAME=SOURCE (NAME a control block or a live parameter)",
                      key="--control", value=item)


class FrameFlow:
    """Codes in, codes out, through a chain, at a fixed frame size.

    Parameters
    ----------
    spec : ChainSpec
    width, height : int
    fps : float
    clip_matrix : str, optional
        Matrix the clip's metadata names (used when the chain says ``standard = "auto"``).
    controls : list of (ControlSpec, ControlMap)
        From :func:`bind_controls`.
    exact : bool
        Solver per pixel instead of tables.
    out_dtype : numpy dtype
        uint8 (clips) or uint16 (16-bit stills, ffv1).
    """

    def __init__(self, spec: ChainSpec, *, width: int, height: int, fps: float,
                 clip_matrix: str | None = None, controls=(), exact: bool = False,
                 out_dtype=np.uint8, t_kelvin: float | None = None, drift: bool = False,
                 speedup: float | None = None):
        self.spec = spec
        self.standard = resolve_standard(spec, clip_matrix, width, height)
        self.timing = resolve_timing(spec, width, height, fps)
        self.controls = list(controls)
        self.engine = FrameEngine(spec, modulated=[c.drives for c, _ in self.controls],
                                  pixel_period_s=self.timing.pixel_period_s,
                                  lead_in_samples=self.timing.blank_samples, exact=exact,
                                  t_kelvin=t_kelvin)
        self.out_dtype = np.dtype(out_dtype)
        self.planes_in = np.empty((3, height, width), dtype=np.float32)
        self.planes_out = np.empty((3, height, width), dtype=np.float32)
        self.rgb_out = np.empty((height, width, 3), dtype=self.out_dtype)
        self._views_lent = False   # the three above point at arrays show_views was given
        self.bypass = False
        #: Thermal drift: junction temperatures follow the chain's warm-up profile and
        #: self-heating; tables are rebuilt when they move by more than a threshold.
        self.follower = None
        if drift:
            from livecurve.circuit.thermal import TableFollower, ThermalModel
            self.follower = TableFollower(ThermalModel(spec), speedup=speedup)
        self.fps = float(fps)
        #: Control values used for the last frame: name → per-row array (or scalar).
        self.last_controls: dict = {}
        #: The control sources' times (s) behind ``last_controls``: name → per-row array.
        self.last_control_times: dict = {}

    def live_inputs(self):
        """Control sources that capture from an audio device (the caller starts/stops them)."""
        for _cs, cmap in self.controls:
            src = cmap.source
            for part in getattr(src, "sources", (src,)):
                if getattr(part, "is_live", False) and hasattr(part, "start"):
                    yield part

    def control_values(self, frame_index: int) -> dict:
        """Knob values for every bound control at the times of this frame's rows/pixels.

        File, clip and oscillator sources are read at the frame's own times on the video
        timing.  A live input has its own clock (samples received, not the wall clock — a
        device need not keep real time): its frame is the newest frame period of audio, the
        rows spread over it as they are over a frame.  The times used are kept in
        ``last_control_times``.
        """
        out = {}
        if not self.controls:
            return out
        frame_rows = self.timing.row_time_s(frame_index)
        for cs, cmap in self.controls:
            rows = frame_rows
            live = [p for p in getattr(cmap.source, "sources", (cmap.source,))
                    if getattr(p, "is_live", False)]
            if live:
                t_end = min(li.available_until_s() for li in live)
                rows = frame_rows + ((t_end - 1.0 / self.fps) - frame_rows[0])
            self.last_control_times[cs.drives] = rows
            if cs.rate == "frame":
                out[cs.drives] = float(cmap.values_at(np.array([rows[0]]))[0])
            elif cs.rate == "line":
                out[cs.drives] = cmap.per_line(rows)
            else:
                t = rows[:, None] + self.timing.column_offset_s[None, :]
                out[cs.drives] = cmap.values_at(t)
        return out

    def can_fuse(self) -> bool:
        """True when frames may go through the one-pass Y′CbCr kernel
        (:mod:`livecurve.engine.fused`): tables, not the solver, and no per-pixel control."""
        return not self.engine.exact and all(cs.rate != "pixel" for cs, _ in self.controls)

    def process_planes(self, y: np.ndarray, cb: np.ndarray, cr: np.ndarray, frame_index: int,
                       *, in_legal: bool = True, in_bits: int = 8, out=None,
                       line_step: int = 1):
        """Run one frame of Y′CbCr planes (8-bit, or *in_bits* codes in uint16 planes)
        through the chain in one pass per line (:class:`livecurve.engine.fused.FusedChain`);
        returns 8-bit legal-range (y, cb, cr) planes, *out* when given.  The clip's matrix
        must be :attr:`standard`.  *line_step* > 1 runs only every *line_step*-th line (for
        a view that reads no others; see :meth:`FusedChain.process`).  Bypassed, the
        source's codes come out as they are, re-coded to 8-bit legal range if need be."""
        from livecurve.engine.fused import FusedChain
        fc = getattr(self, "_fused", None)
        if fc is None or fc.in_legal != bool(in_legal) or fc.in_bits != int(in_bits):
            fc = self._fused = FusedChain(self.engine, space=self.spec.space,
                                          standard=self.standard,
                                          converter_bits=self.spec.converter_bits,
                                          converter_legal=self.spec.converter_legal,
                                          in_legal=in_legal, in_bits=in_bits)
        if out is None:
            out = tuple(np.empty(a.shape, np.uint8) for a in (y, cb, cr))
        if self.bypass:
            return fc.passthrough(y, cb, cr, out=out)
        if self.follower is not None:
            self.follower.maybe_update(self.engine, frame_index / self.fps)
        ctl = self.control_values(frame_index)
        self.last_controls = ctl
        fc.engine = self.engine
        return fc.process(y, cb, cr, controls=ctl, out=out, line_step=line_step)

    def view_planes(self, planes_in, planes_out, *, step: int = 2, in_legal: bool = True,
                    in_bits: int = 8, source_rgb: bool = True):
        """After :meth:`process_planes`: point :attr:`planes_in`, :attr:`planes_out` and
        :attr:`rgb_out` at every *step*-th line and sample of the frame (volts, and R′G′B′
        codes through the output converter's matrix), for the window's picture and
        monitors at a fixed cost.  Returns the source's R′G′B′ at the same size (or
        :attr:`rgb_out` when *source_rgb* is False)."""
        return self.show_views(self.make_views(planes_in, planes_out, step=step,
                                               in_legal=in_legal, in_bits=in_bits,
                                               source_rgb=source_rgb))

    def make_views(self, planes_in, planes_out, *, step: int = 2, in_legal: bool = True,
                   in_bits: int = 8, source_rgb: bool = True) -> tuple:
        """The views :meth:`view_planes` makes, as ``(planes_in, planes_out, rgb_out,
        source R′G′B′ or None)``, without touching the flow (any thread may make them)."""
        from livecurve.engine.fused import sampled_volts
        sp, std = self.spec.space, self.standard
        v_in = sampled_volts(*planes_in, space=sp, standard=std, step=step, in_legal=in_legal,
                             in_bits=in_bits)
        v_out = sampled_volts(*planes_out, space=sp, standard=std, step=step)
        # the output planes hold the converter's codes already: a 16-bit converter only
        # carries them on to the 8-bit R′G′B′ word (no second visible rounding)
        rgb_out = volts_to_codes(v_out, space=sp, standard=std, converter_bits=16,
                                 converter_legal=True, out_dtype=np.uint8)
        src = None
        if source_rgb:
            src = volts_to_codes(v_in, space=sp, standard=std, converter_bits=16,
                                 converter_legal=True, out_dtype=np.uint8)
        return v_in, v_out, rgb_out, src

    def show_views(self, views: tuple):
        """Point :attr:`planes_in`, :attr:`planes_out`, :attr:`rgb_out` at *views* (from
        :meth:`make_views`); returns the picture to show beside them (the source's R′G′B′
        when made, else :attr:`rgb_out`)."""
        self.planes_in, self.planes_out, self.rgb_out, src = views
        self._views_lent = True        # process() must not write into them
        return self.rgb_out if src is None else src

    def process(self, rgb: np.ndarray, frame_index: int) -> np.ndarray:
        """Run one decoded frame through the chain; returns the output R′G′B′ codes
        (a buffer reused on the next call)."""
        h, w = rgb.shape[:2]
        if self.planes_in.shape != (3, h, w) or self._views_lent:
            # after view_planes / show_views pointed them at arrays of someone else's
            self.planes_in = np.empty((3, h, w), dtype=np.float32)
            self.planes_out = np.empty((3, h, w), dtype=np.float32)
            self.rgb_out = np.empty((h, w, 3), dtype=self.out_dtype)
            self._views_lent = False
        ctl = self._process_into(rgb, frame_index, self.planes_in, self.planes_out,
                                 self.rgb_out)
        if ctl is not None:
            self.last_controls = ctl
        return self.rgb_out

    def process_fresh(self, rgb: np.ndarray, frame_index: int, *, step: int = 1) -> tuple:
        """As :meth:`process`, into new arrays and without touching the flow's own (another
        thread may make frames ahead with it): ``(planes_in, planes_out, rgb_out, controls
        used)``, the controls None when bypassed.

        *step* > 1 makes a view for a window that reads every *step*-th line and sample:
        only those lines go through the chain (each whole, as line filters run along a
        line, so they come out as in a full pass), and the arrays returned hold every
        *step*-th sample of them, shape (3, ⌈H/step⌉, ⌈W/step⌉)."""
        if isinstance(step, bool) or int(step) != step or step < 1:
            raise ValueError(f"step must be a whole number >= 1, not {step!r}")
        step = int(step)
        lines = rgb if step == 1 else np.ascontiguousarray(rgb[::step])
        h, w = lines.shape[:2]
        pin = np.empty((3, h, w), dtype=np.float32)
        pout = np.empty((3, h, w), dtype=np.float32)
        if step == 1:
            rout = np.empty((h, w, 3), dtype=self.out_dtype)
            ctl = self._process_into(lines, frame_index, pin, pout, rout)
            return pin, pout, rout, ctl
        ctl = self._process_into(lines, frame_index, pin, pout, None, line_step=step)
        pin = np.ascontiguousarray(pin[:, :, ::step])
        pout = np.ascontiguousarray(pout[:, :, ::step])
        rout = volts_to_codes(pout, space=self.spec.space, standard=self.standard,
                              converter_bits=self.spec.converter_bits,
                              converter_legal=self.spec.converter_legal,
                              out_dtype=self.out_dtype)
        return pin, pout, rout, ctl

    def _process_into(self, rgb, frame_index: int, planes_in, planes_out, rgb_out, *,
                      line_step: int = 1):
        """codes → volts → chain → output codes into the given arrays (no codes when
        *rgb_out* is None); returns the control values used (None when bypassed).  With
        *line_step* > 1, *rgb* holds every *line_step*-th line of the frame and each line's
        controls are those of its place in the frame."""
        codes_to_volts(rgb, space=self.spec.space, standard=self.standard, bits=None,
                       out=planes_in)
        ctl = None
        if self.bypass:
            np.copyto(planes_out, planes_in)
        else:
            if self.follower is not None:
                self.follower.maybe_update(self.engine, frame_index / self.fps)
            ctl = self.control_values(frame_index)
            run = ctl
            if line_step > 1:   # per-line (H,) and per-pixel (H, W) values: the lines run
                run = {k: v[::line_step] if isinstance(v, np.ndarray) and v.ndim else v
                       for k, v in ctl.items()}
            self.engine.process(planes_in, controls=run, out=planes_out)
        if rgb_out is not None:
            volts_to_codes(planes_out, space=self.spec.space, standard=self.standard,
                           converter_bits=self.spec.converter_bits,
                           converter_legal=self.spec.converter_legal,
                           out_dtype=self.out_dtype, out=rgb_out)
        return ctl
