"""Control sources: what drives a circuit's bias currents and knobs over time.

* :mod:`~livecurve.control.sources` — constants, oscillators, sums, audio files.
* :mod:`~livecurve.control.spec` — the ``--control`` text grammar (``parse_source``).
* :mod:`~livecurve.control.envelope` — envelope follower (rectifier + attack/release).
* :mod:`~livecurve.control.mapping` — source → parameter value, in component terms.
* :mod:`~livecurve.control.live` — live audio input through PortAudio (imported on use).

Every source answers ``values_at(t_s)``: control volts at absolute times in seconds.
"""

from livecurve.control.envelope import follow
from livecurve.control.mapping import (
    ControlMap,
    JunctionCurrentSource,
    Linear,
    ResistorToCurrent,
    thermal_voltage,
)
from livecurve.control.sources import AudioFile, Constant, ControlSource, Lfo, Sum
from livecurve.control.spec import parse_amount, parse_source

__all__ = [
    "AudioFile", "Constant", "ControlMap", "ControlSource", "JunctionCurrentSource", "Lfo",
    "Linear", "ResistorToCurrent", "Sum", "follow", "parse_amount", "parse_source",
    "thermal_voltage",
]
