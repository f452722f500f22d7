#!/usr/bin/python3
"""Reference processing chain for `sluice bench compare`.

Runs, on one core, the per-tile steps of sluice with SciPy 1.10 and
scikit-image 0.19 (Debian python3-scipy, python3-skimage; run it with
/usr/bin/python3) on a raw uint16 volume, times each stage and prints JSON.

Input: raw little-endian uint16 voxels in C order, z slowest and x fastest
(the layout of sluice's raw files, see pkg/volio), shape given as Z,Y,X.

Stages (each timed with time.perf_counter, wall clock, and
time.process_time, CPU of the process; the median of --repeat runs):

  median     scipy.ndimage.median_filter, size 3, mode 'nearest' (for a 3^3
             window the same as the default 'reflect')
  otsu       histogram of the filtered grey in 1024 bins of 64 grey values
             (sluice's uint16 binning, segment.Params.Bins), then
             skimage.filters.threshold_multiotsu(hist=(counts, centres),
             classes=3), then np.digitize(..., right=True): a voxel above a
             threshold (strictly) belongs to the brighter class, as in sluice
  label      scipy.ndimage.label per phase, 26-connectivity (3x3x3 structure,
             the default connectivity of pkg/cluster)
  euler      per phase: skimage.measure.euler_number, connectivity=3 (26)
  gaussian   per phase: scipy.ndimage.gaussian_filter of the float32 0/1
             indicator, sigma 1.5 and truncate 3 (curvature.DefaultSigma and
             levelset.Truncate: the smoothing of sluice's curvature stage),
             mode 'nearest'
  mesh       per phase: skimage.measure.marching_cubes of the smoothed
             indicator at level 0.5 (Lewiner, the default) +
             mesh_surface_area, as pkg/mesh.Area meshes a field

Why the smoothed indicators are meshed: on a raw 0/1 indicator every vertex
is an edge midpoint and most cube polygons are non-planar, so the area
depends on how each polygon is cut into triangles (scikit-image: fixed
diagonals from its case table; pkg/mesh: a fan around the centroid) and on
how ambiguous faces are resolved; the two then differ by a few per cent.
On a smooth field the difference is second order. The 0/1-indicator areas
are still printed, untimed, under "mesh_area_binary" for information.

Phases, darkest to brightest grey: nonwetting, wetting, solid (sluice's
default segment order "nws").

Usage: pipeline.py FILE Z,Y,X [--repeat K]
"""

import os

# One core, like `sluice bench compare` (set before numpy is imported).
for _v in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
           "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS"):
    os.environ[_v] = "1"

import argparse
import json
import statistics
import sys
import time

import numpy as np
import scipy
import skimage
from scipy import ndimage
from skimage.filters import threshold_multiotsu
from skimage.measure import euler_number, marching_cubes, mesh_surface_area

PHASES = ("nonwetting", "wetting", "solid")  # class 0, 1, 2 (darkest first)
BINS = 1024
BIN_WIDTH = 65536 // BINS
GAUSS_SIGMA = 1.5
GAUSS_TRUNCATE = 3.0
# Voxels whose smoothed value is reported for a pointwise cross-check,
# as fractions of the edges.
PROBES = ((0.5, 0.5, 0.5), (0.25, 0.75, 0.4), (0.8, 0.1, 0.66), (0.0, 0.0, 0.0))


def fail(msg):
    print("pipeline.py: " + msg, file=sys.stderr)
    sys.exit(2)


def parse_args():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("file")
    ap.add_argument("shape", help="Z,Y,X")
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    try:
        shape = tuple(int(s) for s in a.shape.split(","))
    except ValueError:
        fail("%s: bad shape %r (want Z,Y,X)" % (a.file, a.shape))
    if len(shape) != 3 or min(shape) < 2:
        fail("%s: bad shape %r (want three integers >= 2)" % (a.file, a.shape))
    if a.repeat < 1:
        fail("--repeat must be at least 1")
    return a.file, shape, a.repeat


def read(path, shape):
    want = 2 * shape[0] * shape[1] * shape[2]
    try:
        size = os.path.getsize(path)
    except OSError as e:
        fail("%s: %s" % (path, e.strerror))
    if size != want:
        fail("%s: %d bytes, want %d for uint16 %s" % (path, size, want, shape))
    return np.fromfile(path, dtype="<u2").reshape(shape)


def timed(fn, repeat):
    """Runs fn repeat times; returns ((median wall seconds, median CPU
    seconds of the process), last result). On a shared machine the CPU
    time is the steadier figure."""
    ts, cs, out = [], [], None
    for _ in range(repeat):
        c0, t0 = time.process_time(), time.perf_counter()
        out = fn()
        ts.append(time.perf_counter() - t0)
        cs.append(time.process_time() - c0)
    return (statistics.median(ts), statistics.median(cs)), out


def main():
    path, shape, repeat = parse_args()
    grey = read(path, shape)
    nvox = grey.size
    stages, results = {}, {}

    def record(name, t):
        wall, cpu = t
        stages[name] = {"seconds": wall, "mvox_per_s": nvox / wall / 1e6,
                        "cpu_seconds": cpu, "mvox_per_cpu_s": nvox / max(cpu, 1e-9) / 1e6}

    s, med = timed(lambda: ndimage.median_filter(grey, size=3, mode="nearest"), repeat)
    record("median", s)

    def otsu():
        counts = np.bincount((med >> 6).ravel(), minlength=BINS)
        centres = np.arange(BINS) * BIN_WIDTH + BIN_WIDTH / 2
        t = threshold_multiotsu(hist=(counts, centres), classes=3)
        return t, np.digitize(med, t, right=True).astype(np.uint8)

    s, (thresholds, cls) = timed(otsu, repeat)
    record("otsu", s)
    results["thresholds"] = [float(v) for v in thresholds]
    results["voxels"] = {p: int(np.count_nonzero(cls == k)) for k, p in enumerate(PHASES)}

    struct26 = np.ones((3, 3, 3), dtype=bool)
    s, counts = timed(lambda: [ndimage.label(cls == k, structure=struct26)[1] for k in range(3)], repeat)
    record("label", s)
    results["clusters"] = {p: int(counts[k]) for k, p in enumerate(PHASES)}

    s, euler = timed(lambda: [euler_number(cls == k, connectivity=3) for k in range(3)], repeat)
    record("euler", s)
    results["euler26"] = {p: int(euler[k]) for k, p in enumerate(PHASES)}

    s, smooth = timed(lambda: [ndimage.gaussian_filter((cls == k).astype(np.float32), sigma=GAUSS_SIGMA,
                                                       truncate=GAUSS_TRUNCATE, mode="nearest")
                               for k in range(3)], repeat)
    record("gaussian", s)
    sm = smooth[0]
    probes = []
    for fz, fy, fx in PROBES:
        z, y, x = int(fz * (shape[0] - 1)), int(fy * (shape[1] - 1)), int(fx * (shape[2] - 1))
        probes.append({"z": z, "y": y, "x": x, "value": float(sm[z, y, x])})
    results["gaussian"] = {"sigma": GAUSS_SIGMA, "truncate": GAUSS_TRUNCATE,
                           "sum": float(sm.sum(dtype=np.float64)), "probes": probes}

    def area(field):
        v, f, _, _ = marching_cubes(field, 0.5)
        return float(mesh_surface_area(v, f))

    s, areas = timed(lambda: [area(smooth[k]) for k in range(3)], repeat)
    record("mesh", s)
    results["mesh_area"] = {p: areas[k] for k, p in enumerate(PHASES)}
    # Untimed, for information (see the module doc).
    results["mesh_area_binary"] = {p: area((cls == k).astype(np.float32)) for k, p in enumerate(PHASES)}

    total = sum(v["seconds"] for v in stages.values())
    cpu = sum(v["cpu_seconds"] for v in stages.values())
    json.dump({
        "shape": list(shape),
        "voxels": nvox,
        "repeat": repeat,
        "versions": {"python": sys.version.split()[0], "numpy": np.__version__,
                     "scipy": scipy.__version__, "skimage": skimage.__version__},
        "stages": stages,
        "chain": {"seconds": total, "mvox_per_s": nvox / total / 1e6,
                  "cpu_seconds": cpu, "mvox_per_cpu_s": nvox / max(cpu, 1e-9) / 1e6},
        "results": results,
    }, sys.stdout, indent=1)
    print()


if __name__ == "__main__":
    main()
