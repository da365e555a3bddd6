#!/usr/bin/env bash
# Sets up livecurve on a fresh Debian machine: system packages the tool and its
# tests need, then the Python package itself (editable) with its test extras.
# Safe to run again: it installs only what is missing.
set -euo pipefail
cd "$(dirname "$0")/.."

debs=(ngspice xvfb xdotool x11-utils libportaudio2 alsa-utils libasound2-plugins fonts-dejavu-core)
missing=()
for p in "${debs[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
done
if [ ${#missing[@]} -gt 0 ]; then
  if [ "$(id -u)" = 0 ]; then
    echo "livecurve setup: installing Debian packages: ${missing[*]}"
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${missing[@]}" >/dev/null
  elif command -v sudo >/dev/null 2>&1; then
    sudo apt-get update -qq
    sudo DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${missing[@]}" >/dev/null
  else
    echo "livecurve setup: please install these Debian packages: ${missing[*]}" >&2
  fi
fi

python3 -m pip install -q --disable-pip-version-check -e ".[test]"
