#!/usr/bin/python3
# Copied unchanged from the workplace's shared benchmark folder (shared/bench/peer_numpy.py).
"""The peer flexure is measured against: what a geophysicist writes instead of flexure.
A vectorised numpy/scipy least-squares quadric fit over an N x N window (scipy.ndimage.correlate
with the rows of the window design matrix's pseudo-inverse), Roberts (2001) attribute formulas,
GDAL in, 12 float32 bands out uncompressed. No null handling (a peer's usual shortcut).

usage: peer_numpy.py IN.tif OUT.tif N      (Debian: python3-gdal python3-numpy python3-scipy)
Compare side by side in one run, best of several, e.g.
  /usr/bin/time -f %e python3 peer_numpy.py big.tif peer.tif 9
  /usr/bin/time -f %e flexure curvature big.tif --out out --windows 9 --domain depth --quiet
"""
import sys
import numpy as np
from osgeo import gdal
from scipy import ndimage

gdal.UseExceptions()


def lsq_coefficients(z, dx, dy, n):
    """a, b, c, d, e of z = a x^2 + b y^2 + c x y + d x + e y + f over n x n windows (x east, y north)."""
    h = n // 2
    jj, ii = np.meshgrid(np.arange(-h, h + 1), np.arange(-h, h + 1))
    x, y = jj * dx, -ii * dy
    A = np.stack([x.ravel() ** 2, y.ravel() ** 2, (x * y).ravel(), x.ravel(), y.ravel(), np.ones(n * n)], 1)
    P = np.linalg.pinv(A)
    return [ndimage.correlate(z, P[k].reshape(n, n), mode="nearest") for k in range(5)]


def main(src, dst, n):
    ds = gdal.Open(src)
    z = ds.GetRasterBand(1).ReadAsArray().astype(np.float64)
    gt = ds.GetGeoTransform()
    a, b, c, d, e = lsq_coefficients(z, gt[1], -gt[5], n)
    g = 1 + d * d + e * e
    kmean = (a * (1 + e * e) + b * (1 + d * d) - c * d * e) / g ** 1.5
    kgauss = (4 * a * b - c * c) / g ** 2
    root = np.sqrt(np.maximum(kmean ** 2 - kgauss, 0))
    kmax, kmin = kmean + root, kmean - root
    r2 = np.sqrt((a - b) ** 2 + c * c)
    kpos, kneg = (a + b) + r2, (a + b) - r2
    p2 = np.maximum(d * d + e * e, 1e-30)
    kdip = 2 * (a * d * d + b * e * e + c * d * e) / (p2 * g ** 1.5)
    kstrike = 2 * (a * e * e + b * d * d - c * d * e) / (p2 * g ** 0.5)
    curvedness = np.sqrt((kmax ** 2 + kmin ** 2) / 2)
    shape = (2 / np.pi) * np.arctan2(kmin + kmax, kmax - kmin)
    dip = np.degrees(np.arctan(np.sqrt(d * d + e * e)))
    azi = np.degrees(np.arctan2(d, e)) % 360
    bands = [kmean, kgauss, kmax, kmin, kpos, kneg, kdip, kstrike, curvedness, shape, dip, azi]
    out = gdal.GetDriverByName("GTiff").Create(dst, z.shape[1], z.shape[0], len(bands), gdal.GDT_Float32)
    out.SetGeoTransform(gt)
    out.SetProjection(ds.GetProjection())
    for i, arr in enumerate(bands):
        out.GetRasterBand(i + 1).WriteArray(arr.astype(np.float32))
    out = None


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2], int(sys.argv[3]))
