"""Benchmark of DO saturation: scalar µs/call, and 1,000,000 points against gsw.O2sol_SP_pt on the same arrays."""

from __future__ import annotations

import statistics
import time
import timeit

import numpy as np

N_POINTS = 1_000_000
REPEATS = 9


def _median_s(fn, repeats: int = REPEATS) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def _scalar_us(stmt, number: int = 20000) -> float:
    runs = timeit.repeat(stmt, number=number, repeat=REPEATS)
    return statistics.median(runs) / number * 1e6


def main() -> int:
    import gsw

    from core.science.oxygen import do_saturation_mg_l

    print("scalar saturation (Python floats), median of", REPEATS, "runs:")
    for label, stmt in [
        ("benson-krause, 1 atm, S 0", lambda: do_saturation_mg_l(18.5)),
        ("benson-krause, 1002.3 hPa, S 0.2", lambda: do_saturation_mg_l(18.5, 1002.3, 0.2)),
        ("garcia-gordon, 1002.3 hPa, S 0.2", lambda: do_saturation_mg_l(18.5, 1002.3, 0.2, "garcia-gordon")),
    ]:
        us = _scalar_us(stmt)
        print(f"  {label:36s} {us:7.2f} µs/call  (target <= 20 µs: {'ok' if us <= 20 else 'MISSED'})")

    rng = np.random.default_rng(20261201)
    t = rng.uniform(0.0, 40.0, N_POINTS)
    s = rng.uniform(0.0, 40.0, N_POINTS)
    p = rng.uniform(600.0, 1050.0, N_POINTS)
    for _ in range(2):  # warm caches and page in the arrays
        gsw.O2sol_SP_pt(s, t)
        do_saturation_mg_l(t, 1013.25, s)
    cases = [
        ("benson-krause, 1 atm, S array", lambda: do_saturation_mg_l(t, 1013.25, s)),
        ("benson-krause, P array, S array", lambda: do_saturation_mg_l(t, p, s)),
        ("garcia-gordon, 1 atm, S array (mg/L)", lambda: do_saturation_mg_l(t, 1013.25, s, "garcia-gordon")),
        ("garcia-gordon, P array, S array (mg/L)", lambda: do_saturation_mg_l(t, p, s, "garcia-gordon")),
    ]
    # Interleave gsw and ours in every repeat so that load on the machine hits both alike; report the
    # median times and the median of the per-repeat ratios.
    ref_times: list[float] = []
    ours: dict[str, list[float]] = {label: [] for label, _ in cases}
    ratios: dict[str, list[float]] = {label: [] for label, _ in cases}
    for _ in range(REPEATS):
        t0 = time.perf_counter()
        gsw.O2sol_SP_pt(s, t)
        ref = time.perf_counter() - t0
        ref_times.append(ref)
        for label, fn in cases:
            t0 = time.perf_counter()
            fn()
            dt = time.perf_counter() - t0
            ours[label].append(dt)
            ratios[label].append(dt / ref)
    print(f"vectorised, {N_POINTS:,} points, median of {REPEATS} interleaved runs:")
    print(f"  {'gsw.O2sol_SP_pt(S, t) [µmol/kg, 1 atm]':40s} {statistics.median(ref_times) * 1e3:8.2f} ms  (reference)")
    for label, _ in cases:
        ratio = statistics.median(ratios[label])
        print(
            f"  {label:40s} {statistics.median(ours[label]) * 1e3:8.2f} ms  ratio {ratio:5.2f} x gsw"
            f"  (target <= 1.5: {'ok' if ratio <= 1.5 else 'MISSED'})"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
