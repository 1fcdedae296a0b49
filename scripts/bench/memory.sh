#!/usr/bin/env bash
# Peak resident memory, wall time and output size of `flexure curvature` (13 attributes,
# window 9) on 2048 x 2048 and 8192 x 8192 depth grids, and of `flexure window-study`
# (8 windows) on 2048 x 2048, measured with GNU time; prints one line per run.
# Needs the release build (make build) and python3 with numpy and GDAL to make the grids
# (scripts/install-system-deps.sh --bench). Scratch files go to ${BENCH_DIR:-target/bench-memory}.
set -euo pipefail
root="$(cd "$(dirname "$0")/../.." && pwd)"
flexure="$root/target/release/flexure"
dir="${BENCH_DIR:-$root/target/bench-memory}"
mkdir -p "$dir"
python=/usr/bin/python3
[ -x "$python" ] || python=python3

make_grid() { # side, path: Gaussian-fold depth grid with 0.2 m seeded noise, float32, EPSG:32625
  [ -f "$2" ] && return
  "$python" - "$1" "$2" <<'PY'
import sys
import numpy as np
from osgeo import gdal, osr
n, out = int(sys.argv[1]), sys.argv[2]
y, x = np.mgrid[0:n, 0:n].astype(np.float64) * 25.0
z = 2500.0 + 0.2 * np.random.default_rng(11).standard_normal((n, n))
for k in range(13):
    w = (x - 4000.0 * k) * np.cos(np.radians(30 + 7 * k)) - (y - 4000.0 * k) * np.sin(np.radians(30 + 7 * k))
    z -= (40.0 if k % 2 == 0 else -25.0) * np.exp(-w * w / (2 * 600.0 ** 2))
ds = gdal.GetDriverByName("GTiff").Create(out, n, n, 1, gdal.GDT_Float32, ["TILED=YES", "COMPRESS=ZSTD", "BIGTIFF=YES"])
ds.SetGeoTransform([500000.0, 25.0, 0.0, 3900000.0, 0.0, -25.0])
srs = osr.SpatialReference(); srs.ImportFromEPSG(32625); ds.SetProjection(srs.ExportToWkt())
band = ds.GetRasterBand(1); band.WriteArray(z.astype(np.float32)); band.SetUnitType("metre")
ds = None
PY
}

measure() { # label, command...
  local label="$1"; shift
  local log="$dir/time.log"
  /usr/bin/time -f "%e %M" -o "$log" "$@" >/dev/null
  read -r seconds kib <"$log"
  printf '%-34s %8.2f s %8.0f MB peak\n' "$label" "$seconds" "$((kib / 1024))"
}

for side in 2048 8192; do
  grid="$dir/depth_$side.tif"
  make_grid "$side" "$grid"
  out="$dir/curvature_$side"
  rm -rf "$out"
  measure "curvature ${side}^2 w9" "$flexure" curvature "$grid" --out "$out" --windows 9 --quiet
  raw=$((side * side * 13 * 4))
  size=$(stat -c %s "$out/depth_${side}_w09.tif")
  printf '%-34s %8.2f x the raw band size (%d MB)\n' "  output file" "$(echo "$size / $raw" | bc -l)" "$((size / 1048576))"
done
rm -rf "$dir/study_2048"
measure "window-study 2048^2, 8 windows" "$flexure" window-study "$dir/depth_2048.tif" \
  --out "$dir/study_2048" --windows 3,5,7,9,13,17,25,33 --quiet
