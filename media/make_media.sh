#!/usr/bin/env bash
# Remake the README's pictures: a short clip of the bundled default scenario (media/demo.gif)
# and that run's summary plot (media/summary.png). Run from anywhere, with wheelbench installed:
#   bash media/make_media.sh
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
wheelbench run --out "$work/run" --video "$here/demo.gif" --size 640x360 --fps 15 --force
cp "$work/run/summary.png" "$here/summary.png" && chmod 644 "$here/summary.png"
ls -l "$here/demo.gif" "$here/summary.png"
