#!/usr/bin/env bash
# Installs what Rete needs from Debian 12's archive: `build` for building and running,
# `test` adds what the tests and benchmarks compare against (the Python reference
# libraries for /usr/bin/python3, a virtual screen for dialog screenshots, GNU parallel).
# Run as root, or as a user who may use sudo.
set -euo pipefail
what=${1:-build}
build_packages=(build-essential pkg-config meson ninja-build gettext
  libglib2.0-dev libjson-glib-dev libopenblas-dev libopenblas0-pthread libgegl-dev libcairo2-dev
  gimp libgimp2.0-dev)
test_packages=(python3 python3-numpy python3-scipy python3-skimage python3-sklearn python3-opencv
  python3-torch xvfb xauth x11-utils openbox dbus-daemon gtk2-engines-pixbuf imagemagick parallel)
packages=("${build_packages[@]}")
[ "$what" = test ] && packages+=("${test_packages[@]}")

missing=()
for p in "${packages[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q 'install ok installed' || missing+=("$p")
done
if [ ${#missing[@]} -eq 0 ]; then
  echo "rete: all ${#packages[@]} Debian packages for '$what' are installed" >&2
  exit 0
fi
sudo=()
if [ "$(id -u)" -ne 0 ]; then
  command -v sudo >/dev/null || { echo "rete: not root and no sudo: install as root: ${missing[*]}" >&2; exit 1; }
  sudo=(sudo)
fi
echo "rete: installing ${#missing[@]} Debian packages: ${missing[*]}" >&2
export DEBIAN_FRONTEND=noninteractive
"${sudo[@]}" apt-get -o DPkg::Lock::Timeout=600 update -q >&2
"${sudo[@]}" apt-get -o DPkg::Lock::Timeout=600 install -y -q --no-install-recommends "${missing[@]}" >&2
