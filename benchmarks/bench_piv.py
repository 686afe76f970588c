"""Speed and memory of the correlation engine on synthetic frame pairs (prints figures).

For each frame size: seconds per pair at default settings (median of a few runs), peak traced
memory of one run, and the ratio of the whole ``correlate_pair`` time to the bare cost of the
batched FFT correlations of the same windows (same counts and shapes, timed in the same run,
interleaved with the whole runs): two forward real FFTs, the conjugate product and one inverse
per pass. The CPU-time ratio (all threads) is printed too: on a busy machine it is the steadier
figure.

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
from core.piv import BAND_WINDOWS, PivSettings, correlate_pair


def _window_stacks(shape, settings: PivSettings) -> list[tuple[np.ndarray, np.ndarray]]:
    """Random window stacks of the same counts and shapes as the passes of ``settings``."""
    rng = np.random.default_rng(0)
    stacks = []
    for p in settings.passes:
        step = p.spacing_px
        count = ((shape[0] - p.window_px) // step + 1) * ((shape[1] - p.window_px) // step + 1)
        size = (count, p.window_px, p.window_px)
        stacks.append((rng.random(size, dtype=np.float32), rng.random(size, dtype=np.float32)))
    return stacks


def bare_fft(stacks, workers: int) -> None:
    """The batched FFT correlations alone: two forward transforms, product, one inverse, in
    batches of ``BAND_WINDOWS`` windows as the engine does (such batches ran faster here than
    one batch of the whole frame, so this is the stricter lower bound)."""
    for win_a, win_b in stacks:
        for start in range(0, len(win_a), BAND_WINDOWS):
            part = slice(start, start + BAND_WINDOWS)
            spec = scipy.fft.rfft2(win_a[part], workers=workers)
            spec_b = scipy.fft.rfft2(win_b[part], workers=workers)
            np.conjugate(spec, out=spec)
            spec *= spec_b
            scipy.fft.irfft2(spec, s=win_a.shape[-2:], workers=workers)


def _timed(fn) -> tuple[float, float]:
    """(wall seconds, process CPU seconds over all threads) of one call."""
    wall, cpu = time.perf_counter(), time.process_time()
    fn()
    return time.perf_counter() - wall, time.process_time() - cpu


def bench(size: int, repeats: int) -> None:
    shape = (size, size)
    vortex = synth.lamb_oseen((size * 0.45, size * 0.55), 2.0e3 * size / 1024, size / 16)

    def field(x, y):
        dx, dy = vortex(x, y)
        return dx + 4.0, dy - 1.5

    frame_a, frame_b = synth.particle_pair(shape, field, seed=1)
    settings = PivSettings()
    workers = settings.workers or os.cpu_count() or 1
    stacks = _window_stacks(shape, settings)
    vf = correlate_pair(frame_a, frame_b, settings=settings)  # warm-up (FFT plans, imports)
    bare_fft(stacks, workers)
    whole, bare = [], []
    for _ in range(repeats):  # interleaved, so both see the same machine load
        whole.append(_timed(lambda: correlate_pair(frame_a, frame_b, settings=settings)))
        bare.append(_timed(lambda: bare_fft(stacks, workers)))
    wall = statistics.median(w for w, _ in whole)
    bare_wall = statistics.median(w for w, _ in bare)
    cpu_ratio = statistics.median(c for _, c in whole) / statistics.median(c for _, c in bare)
    tracemalloc.start()
    correlate_pair(frame_a, frame_b, settings=settings)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    maxrss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    tx, ty = field(vf.x_px, vf.y_px)
    rms = float(np.sqrt(np.nanmean((vf.dx_px - tx) ** 2 + (vf.dy_px - ty) ** 2)))
    print(
        f"{size}x{size}: {wall:.2f} s/pair (median of {repeats}), bare FFT {bare_wall:.2f} s, "
        f"ratio {wall / bare_wall:.2f} (CPU-time ratio {cpu_ratio:.2f}), "
        f"peak traced {peak / 2**20:.0f} MiB, "
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
