"""Throughput and memory of confpop.boltzmann_weights for a large ensemble.

1e5 conformers x 100 temperatures (1e7 weights). Prints weights per second and the peak
traced memory (tracemalloc) relative to the output array, for confpop's vectorized routine
and for a straightforward per-temperature Python loop measured in the same run.

Targets: >= 1e8 weights/s; peak memory <= 3x the output array.

Run:  OMP_NUM_THREADS=1 python benchmarks/bench_weights.py [--repeats N]
"""

from __future__ import annotations

import argparse
import os
import statistics
import time
import tracemalloc

import numpy as np
from scipy.special import logsumexp

from confpop import boltzmann_weights
from confpop.units import gas_constant

N_CONFORMERS = 100_000
N_TEMPERATURES = 100


def loop_weights(energies, temperatures, degeneracy=None):
    """The straightforward way: one temperature at a time, then stack the rows."""
    r = gas_constant("kcal/mol")
    rows = []
    for t in temperatures:
        x = -(energies - energies.min()) / (r * t)
        if degeneracy is not None:
            x = x + np.log(degeneracy)
        rows.append(np.exp(x - logsumexp(x)))
    return np.array(rows)


def timed(fn, repeats):
    """Best and median wall time, and best CPU time of this process (less sensitive to other
    processes competing for the cores)."""
    times, cpu = [], []
    for _ in range(repeats):
        start, start_cpu = time.perf_counter(), time.process_time()
        fn()
        times.append(time.perf_counter() - start)
        cpu.append(time.process_time() - start_cpu)
    return min(times), statistics.median(times), min(cpu)


def peak_memory(fn):
    tracemalloc.start()
    tracemalloc.reset_peak()
    result = fn()
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak, result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()

    rng = np.random.default_rng(2024)
    # invented ensemble: absolute energies near -1e4 hartree expressed in kcal/mol, spread of
    # ~0-60 kcal/mol, temperatures 150-600 K, a few mirror-image pairs merged (g = 2)
    energies = -1.0e4 * 627.509474063 + rng.gamma(2.0, 4.0, N_CONFORMERS)
    temperatures = np.linspace(150.0, 600.0, N_TEMPERATURES)
    degeneracy = rng.choice([1.0, 2.0], size=N_CONFORMERS, p=[0.8, 0.2])
    n_weights = N_CONFORMERS * N_TEMPERATURES
    output_bytes = n_weights * 8

    print(f"{N_CONFORMERS:.0e} conformers x {N_TEMPERATURES} temperatures = {n_weights:.0e} weights "
          f"(output {output_bytes / 2**20:.0f} MiB); repeats {args.repeats}; "
          f"OMP_NUM_THREADS={os.environ.get('OMP_NUM_THREADS', 'unset')}; "
          f"load average {os.getloadavg()[0]:.2f}")

    for label, g in (("g = 1", None), ("with degeneracy", degeneracy)):
        ours = lambda: boltzmann_weights(energies, temperatures, degeneracy=g)  # noqa: E731
        loop = lambda: loop_weights(energies, temperatures, g)  # noqa: E731
        np.testing.assert_allclose(ours(), loop(), rtol=1e-9, atol=1e-300)

        best, median, cpu = timed(ours, args.repeats)
        loop_best, loop_median, loop_cpu = timed(loop, args.repeats)
        peak, _ = peak_memory(ours)
        loop_peak, _ = peak_memory(loop)

        print(f"\n[{label}]")
        print(f"  confpop.boltzmann_weights : best {best * 1e3:7.1f} ms  ({n_weights / best:.2e} weights/s), "
              f"median {median * 1e3:7.1f} ms ({n_weights / median:.2e} weights/s)")
        print(f"  per-temperature loop      : best {loop_best * 1e3:7.1f} ms  ({n_weights / loop_best:.2e} weights/s), "
              f"median {loop_median * 1e3:7.1f} ms")
        print(f"  CPU time (best)           : {cpu * 1e3:7.1f} ms ({n_weights / cpu:.2e} weights per CPU-s); "
              f"loop {loop_cpu * 1e3:7.1f} ms")
        print(f"  speed-up vs loop          : {loop_best / best:.2f}x (best), {loop_median / median:.2f}x (median)")
        print(f"  peak memory               : {peak / 2**20:.1f} MiB = {peak / output_bytes:.2f}x output "
              f"(loop: {loop_peak / 2**20:.1f} MiB = {loop_peak / output_bytes:.2f}x)")
        wall = "met" if n_weights / best >= 1e8 else "MISSED"
        on_cpu = "met" if n_weights / cpu >= 1e8 else "MISSED"
        print(f"  targets: >= 1e8 weights/s {wall} on wall time (best), {on_cpu} on CPU time; "
              f"memory <= 3x output {'met' if peak <= 3 * output_bytes else 'MISSED'}")


if __name__ == "__main__":
    main()
