#!/bin/sh
# Regenerates the README's figures in docs/figures/ from the bundled samples
# and the sample season (scripts/make-season.py, fixed seed, invented fleet).
# Needs a built packbook (build/packbook); takes about half a minute.
set -eu
cd "$(dirname "$0")/.."
pb=build/packbook
out=docs/figures
mkdir -p "$out"
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
$pb plot samples/tm15-deep.csv --cells 4 --chemistry lipo --capacity 5000 --size 1400x1000 \
    --title "TM-15 - Brindle Fen, flown past the cut-off" -o "$out/flight-tm15.png"
$pb plot samples/tm12-cells.csv --chemistry lihv --capacity 4200 --size 1400x1100 \
    --title "TM-12 - Brindle Fen, reed beds" -o "$out/flight-tm12.png"
PACKBOOK_DB="$tmp/season.db" /usr/bin/python3 scripts/make-season.py --import --packbook "$pb" \
    "$tmp/season" >/dev/null
PACKBOOK_DB="$tmp/season.db" $pb plot trend TM-03 --size 1400x900 -o "$out/trend-tm03.png"
PACKBOOK_DB="$tmp/season.db" $pb pack pair TM-01 TM-05 >/dev/null # a registered pair, drawn joined
PACKBOOK_DB="$tmp/season.db" $pb plot fleet --size 1200x850 \
    --title "Tallowmere Survey Co-operative - fleet health" -o "$out/fleet.png"
