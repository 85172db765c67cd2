#!/usr/bin/env bash
# Look at a dossier as a reader would: render the HTML in headless Chromium and
# the PDF pages with pdftoppm, into PNG files for inspection.
#   scripts/look_at_dossier.sh reports/<case> [OUTDIR]
# Needs Debian's chromium and poppler-utils (apt-get install chromium poppler-utils).
set -euo pipefail
dir=${1:?usage: scripts/look_at_dossier.sh DOSSIER_DIR [OUTDIR]}
out=${2:-$dir/../.look}
mkdir -p "$out"
profile=$(mktemp -d)
chromium --headless --no-sandbox --disable-gpu --disable-quic --no-first-run \
  --disable-background-networking --disable-component-update --disable-sync \
  --user-data-dir="$profile" --window-size=1280,4000 \
  --screenshot="$out/html.png" "file://$(realpath "$dir")/dossier.html" >/dev/null 2>&1
rm -rf "$profile"
pdftoppm -r 60 -png "$dir/dossier.pdf" "$out/pdf"
ls "$out"
