"""livecurve.monitors: waveform, vectorscope, transfer view, level and flash checks.

Numbers first (histograms and counts from numba kernels, tested exactly), drawing
second (:mod:`livecurve.monitors.draw`, OpenCV).  Every monitor takes the engine's
planar float32 frames of zero-centred channel volts, shape (3, H, W).
"""

from livecurve.monitors.alarms import LevelAlarms, level_alarms, zebra_mask
from livecurve.monitors.flash import FlashMeter, FlashReport, bt1886_eotf
from livecurve.monitors.transfer import TransferView, transfer_view
from livecurve.monitors.vectorscope import (
    SKIN_LINE_ANGLE_DEG,
    bar_targets,
    level_to_cell,
    skin_line_angle_deg,
    vectorscope,
)
from livecurve.monitors.waveform import level_to_row, trace_offsets_v, waveform

__all__ = [
    "FlashMeter", "FlashReport", "LevelAlarms", "SKIN_LINE_ANGLE_DEG", "TransferView",
    "bar_targets", "bt1886_eotf", "level_alarms", "level_to_cell", "level_to_row",
    "skin_line_angle_deg", "trace_offsets_v", "transfer_view", "vectorscope", "waveform",
    "zebra_mask",
]
