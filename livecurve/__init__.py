"""livecurve: preview analog video-processing circuits on moving pictures.

Data path (one frame): decode (``media``) → component volts (``signal``) →
chain of circuit stages (``circuit`` builds tables, ``engine`` applies them per
pixel and per line) → back to code values (``signal``) → the live window
(``preview``) or files (``outputs``, ``media``), with monitors (``monitors``), control
sources (``control``) and design analysis (``analysis``) on the side.
"""

from livecurve.errors import LivecurveError

__version__ = "0.1.0"
__all__ = ["LivecurveError", "__version__"]
