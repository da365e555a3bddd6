#!/usr/bin/env bash
# Sets up livecurve (scripts/setup.sh) and runs the whole test suite.
# In CI (CI=true) a test whose reference tool (ngspice, Xvfb, ffmpeg, ALSA, OCIO)
# is missing fails instead of skipping.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup.sh
python3 -m pytest -q -p no:cacheprovider "$@"
