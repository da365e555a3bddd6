#!/usr/bin/env bash
# Sets up livecurve (scripts/setup.sh) and runs the built-in demo into ./livecurve-demo.
set -euo pipefail
cd "$(dirname "$0")/.."
bash scripts/setup.sh
livecurve demo --out livecurve-demo --force "$@"
