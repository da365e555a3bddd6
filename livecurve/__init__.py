"""livecurve: preview analog video-processing circuits on moving pictures.

Data path (one frame): decode (``media``) → component volts (``signal``) →
chain of circuit stages (``circuit`` builds tables, ``engine`` applies them per
pixel and per line) → back to code values (``signal``) → the live window
(``preview``) or files (``outputs``, ``media``), with monitors (``monitors``), control
sources (``control``) and design analysis (``analysis``) on the side.
"""

import os as _os

# numba's OpenMP threads sleep between parallel kernels instead of spinning: the cores are
# shared with ffmpeg's decoder and encoder (and the window), and a spinning thread takes
# CPU they need.  Measured in a 1080p render: 14 % less CPU in livecurve's own process,
# 7 % faster overall (benchmarks/README.md, "Real time at HD").  Set before libgomp starts
# (numba starts it at the first parallel kernel); an explicit setting is kept.
_os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")

from livecurve.errors import LivecurveError  # noqa: E402

__version__ = "0.1.0"
__all__ = ["LivecurveError", "__version__"]
