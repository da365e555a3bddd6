"""colour-science as the reference for Y′CbCr matrices and code values (PyPI colour-science).

The tests of this folder compare livecurve's conversions with ``colour.RGB_to_YCbCr`` and
``colour.YCbCr_to_RGB``; this helper imports the package (skip on a laptop without it, fail
in CI) and maps livecurve's standard names to colour-science's ``WEIGHTS_YCBCR`` keys.
"""

from __future__ import annotations

import importlib.util
import warnings

from tests.conftest import require

#: livecurve standard name → key of colour.WEIGHTS_YCBCR.
COLOUR_KEYS = {"bt601": "ITU-R BT.601", "bt709": "ITU-R BT.709", "bt2020": "ITU-R BT.2020"}


def colour_module():
    """Import colour-science quietly (it warns about its optional plotting backend)."""
    require(importlib.util.find_spec("colour") is not None, "python package colour-science")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import colour
    return colour


def weights(standard: str):
    """(Kr, Kb) of *standard* as colour-science stores them."""
    return colour_module().WEIGHTS_YCBCR[COLOUR_KEYS[standard]]
