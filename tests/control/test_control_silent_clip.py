"""A chain whose control block defaults to the clip's soundtrack, used on a clip without
one: a warning, and the knob holds its value (a render is not refused)."""

from __future__ import annotations

import io

import pytest

from livecurve.config.chainfile import load_chain
from livecurve.control.spec import silent_clip
from livecurve.engine.frameflow import bind_controls
from livecurve.errors import MediaError
from livecurve.media import _ffmpeg
from livecurve.outputs.demo import chain_path
from tests.conftest import run_cli


def _clip(path, *, audio: bool):
    args = ["-v", "error", "-y", "-f", "lavfi", "-i", "testsrc2=size=160x90:rate=10:duration=1"]
    if audio:
        args += ["-f", "lavfi", "-i", "sine=frequency=440:sample_rate=48000:duration=1",
                 "-c:a", "aac"]
    args += ["-c:v", "libx264", "-pix_fmt", "yuv420p", str(path)]
    res = _ffmpeg.run(args, timeout_s=120)
    if res.returncode != 0:
        pytest.fail(res.stderr.decode()[-800:])
    return path


@pytest.fixture(scope="module")
def clips(tmp_path_factory):
    d = tmp_path_factory.mktemp("silent")
    return _clip(d / "silent.mp4", audio=False), _clip(d / "tone.mp4", audio=True)


def test_silent_clip_detected(clips):
    silent, tone = clips
    out = io.StringIO()
    assert silent_clip(str(silent), control="beat", stream=out) is True
    msg = out.getvalue()
    assert "warning" in msg and "'beat'" in msg and "no audio stream" in msg
    assert "holds its value" in msg
    out = io.StringIO()
    assert silent_clip(str(tone), control="beat", stream=out) is False
    assert silent_clip(None, control="beat", stream=out) is True  # a still or a camera
    assert out.getvalue() == ""


def test_default_soundtrack_block_left_out_on_a_silent_clip(clips, capsys):
    spec = load_chain(chain_path("night_knee"))
    assert spec.controls["beat"].source == "clip"
    assert bind_controls(spec, [], clip_path=str(clips[0])) == []
    assert "holds its value" in capsys.readouterr().err
    bound = bind_controls(spec, [], clip_path=str(clips[1]))
    assert [(cs.name, cs.source) for cs, _ in bound] == [("beat", "clip")]


def test_explicit_clip_source_still_refused(clips):
    spec = load_chain(chain_path("night_knee"))
    with pytest.raises(MediaError, match="no audio stream"):
        bind_controls(spec, ["beat=clip"], clip_path=str(clips[0]))


def test_render_of_a_silent_clip_warns_and_succeeds(clips, tmp_path):
    out = tmp_path / "out.mp4"
    res = run_cli("render", clips[0], out, "--chain", chain_path("night_knee"), "--quiet")
    assert res.returncode == 0, res.stderr
    assert out.is_file()
    assert "warning: control 'beat'" in res.stderr and "holds its value" in res.stderr
