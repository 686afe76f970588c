"""Speed and memory of the correlation engine on synthetic frame pairs (prints figures).

For each frame size: seconds per pair at default settings (median of a few runs), peak traced
memory of one run, and the ratio of the whole ``correlate_pair`` time to the bare cost of the
batched FFT correlations of the same windows (same counts and shapes, timed in the same run):
two forward real FFTs, the conjugate product and one inverse per pass.

Run: ``python benchmarks/bench_piv.py [--sizes 1024 2048] [--repeats 3]``
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import scipy.fft

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from core import synth
from core.piv import PivSettings, correlate_pair


def bare_fft_seconds(shape, settings: PivSettings, workers: int, repeats: int) -> float:
    """Median time of the batched FFT correlations alone, all passes of ``settings``."""
    rng = np.random.default_rng(0)
    stacks = []
    for p in settings.passes:
        step = p.spacing_px
        count = ((shape[0] - p.window_px) // step + 1) * ((shape[1] - p.window_px) // step + 1)
        size = (count, p.window_px, p.window_px)
        stacks.append((rng.random(size, dtype=np.float32), rng.random(size, dtype=np.float32)))
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        for win_a, win_b in stacks:
            spec = scipy.fft.rfft2(win_a, workers=workers)
            spec_b = scipy.fft.rfft2(win_b, workers=workers)
            np.conjugate(spec, out=spec)
            spec *= spec_b
            scipy.fft.irfft2(spec, s=win_a.shape[-2:], workers=workers)
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def bench(size: int, repeats: int) -> None:
    shape = (size, size)
    vortex = synth.lamb_oseen((size * 0.45, size * 0.55), 2.0e3 * size / 1024, size / 16)

    def field(x, y):
        dx, dy = vortex(x, y)
        return dx + 4.0, dy - 1.5

    frame_a, frame_b = synth.particle_pair(shape, field, seed=1)
    settings = PivSettings()
    workers = settings.workers or os.cpu_count() or 1
    correlate_pair(frame_a, frame_b, settings=settings)  # warm-up (FFT plans, imports)
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        vf = correlate_pair(frame_a, frame_b, settings=settings)
        times.append(time.perf_counter() - start)
    whole = statistics.median(times)
    bare = bare_fft_seconds(shape, settings, workers, repeats)
    tracemalloc.start()
    correlate_pair(frame_a, frame_b, settings=settings)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    maxrss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    tx, ty = field(vf.x_px, vf.y_px)
    rms = float(np.sqrt(np.nanmean((vf.dx_px - tx) ** 2 + (vf.dy_px - ty) ** 2)))
    print(
        f"{size}x{size}: {whole:.2f} s/pair (median of {repeats}), bare FFT {bare:.2f} s, "
        f"ratio {whole / bare:.2f}, peak traced {peak / 2**20:.0f} MiB, "
        f"process max RSS {maxrss_mb:.0f} MiB, {vf.x_px.size} vectors, "
        f"RMS error {rms:.3f} px, workers {workers}"
    )


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[1024, 2048])
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    for size in args.sizes:
        bench(size, args.repeats)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
