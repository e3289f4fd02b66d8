#!/bin/sh
# Regenerates samples/ (fixed seeds). The scenario is invented: the
# Tallowmere Survey Co-operative flies mapping sorties over Brindle Fen.
# Needs a built packbook (build/packbook) for the OCV tables.
set -eu
cd "$(dirname "$0")/.."
sim="/usr/bin/python3 scripts/pbsim.py --packbook build/packbook"
$sim --seed 101 --cells 4 --capacity-mah 5000 --soc0 97 --r0-mohm-cell 4.5 --hover-a 21 \
    --duration-s 660 --rate-hz 5 --format plain \
    --comment "Tallowmere Survey Co-op - pack TM-07 (4S 5000 mAh LiPo) - Brindle Fen, north transect" \
    -o samples/tm07-plain.csv
$sim --seed 102 --cells 6 --chemistry lihv --capacity-mah 4200 --soc0 99 --r0-mohm-cell 5.0 \
    --hover-a 18 --duration-s 540 --rate-hz 5 --format cells --weak-cell 5 --temp-c 14 \
    --comment "Tallowmere Survey Co-op - pack TM-12 (6S 4200 mAh LiHV) - Brindle Fen, reed beds" \
    -o samples/tm12-cells.csv
$sim --seed 103 --cells 4 --capacity-mah 5000 --soc0 96 --r0-mohm-cell 6.0 --hover-a 19 \
    --duration-s 600 --rate-hz 5 --format adc --adc-a-per-count 0.0885 \
    --comment "Tallowmere Survey Co-op - pack TM-03 (4S 5000 mAh LiPo) - current as 10-bit ADC counts" \
    --comment "sense chain: 14000:1 ratio into 510 ohm, 3.3 V reference" \
    -o samples/tm03-adc.csv
$sim --seed 104 --cells 4 --capacity-mah 5000 --soc0 92 --r0-mohm-cell 5.0 --hover-a 20 \
    --duration-s 480 --rate-hz 2 --format voltage-only \
    --comment "Tallowmere Survey Co-op - pack TM-09 (4S 5000 mAh LiPo) - older airframe, no current sensor" \
    -o samples/tm09-voltage-only.csv
# TM-15 flown on past the floor, with a 24 s logger dropout (rows removed): the
# flight figure's shaded intervals; absolute time, so the figure has a date.
$sim --seed 105 --cells 4 --capacity-mah 5000 --soc0 55 --r0-mohm-cell 7.0 --hover-a 26 \
    --duration-s 480 --rate-hz 5 --format epoch --start-epoch 1773913200 -o samples/tm15-deep.csv.tmp
{
    echo "# Tallowmere Survey Co-op - pack TM-15 (4S 5000 mAh LiPo) - flown past the floor; logger dropped 24 s"
    awk -F, 'NR == 1 || $1 < 1773913400 || $1 >= 1773913424' samples/tm15-deep.csv.tmp
} > samples/tm15-deep.csv
rm samples/tm15-deep.csv.tmp
