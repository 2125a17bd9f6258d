#!/usr/bin/env bash
# Configures (once) and builds Rete in build/ (or $RETE_BUILD_DIR).
set -euo pipefail
here=$(cd "$(dirname "$0")/.." && pwd)
build=${RETE_BUILD_DIR:-$here/build}
if [ ! -f "$build/build.ninja" ]; then
  meson setup "$build" "$here" --buildtype=release >&2
fi
ninja -C "$build" >&2
