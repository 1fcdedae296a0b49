#!/usr/bin/env bash
# Installs the Debian/Ubuntu packages flexure builds and tests against, when missing.
# Needed: libgdal-dev (GDAL C library and headers), gdal-bin (gdalinfo, ogrinfo and gdal2xyz.py used by tests),
# libopenblas-dev (LAPACK for the least-squares reference), pkg-config.
# With --test also chromium (the browser test loads report.html headless) and python3-numpy,
# python3-scipy (reference statistics computed by scipy in the tests).
# With --bench also python3-numpy and python3-scipy, for the numpy/scipy peer of the benchmarks.
set -euo pipefail
packages=(libgdal-dev gdal-bin libopenblas-dev pkg-config)
if [ "${1:-}" = "--test" ]; then
  packages+=(chromium python3-numpy python3-scipy)
fi
if [ "${1:-}" = "--bench" ]; then
  packages+=(python3-numpy python3-scipy python3-gdal)
fi
missing=()
for p in "${packages[@]}"; do
  if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
    missing+=("$p")
  fi
done
[ ${#missing[@]} -eq 0 ] && exit 0
if ! command -v apt-get >/dev/null 2>&1; then
  echo "flexure: missing system packages ${missing[*]} and no apt-get here; install them with your package manager" >&2
  exit 1
fi
if [ "$(id -u)" -ne 0 ]; then
  echo "flexure: missing system packages; run: sudo apt-get update && sudo apt-get install -y ${missing[*]}" >&2
  exit 1
fi
echo "flexure: installing system packages: ${missing[*]}"
export DEBIAN_FRONTEND=noninteractive
apt-get update -q
apt-get install -y -q --no-install-recommends "${missing[@]}"
