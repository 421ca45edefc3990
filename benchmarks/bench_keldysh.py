"""Benchmark: tabulated Rytova-Keldysh binding energies vs direct solves.

Run with ``.venv/bin/python benchmarks/bench_keldysh.py`` from the repository
root. Prints the table build time, the time to evaluate 1s binding energies for
100,000 synthetic compounds in 3 dielectric environments from the table, the
extrapolated time of doing the same with direct solves (timed on a sample), the
speedup, and the interpolation error against direct solves.
"""

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "workflow"))

from lamellume import keldysh as K  # noqa: E402

N_COMPOUNDS = 100_000
KAPPAS = np.array([1.0, 2.45, 4.0])  # suspended, SiO2-like substrate, hBN-encapsulated-like
N_DIRECT_TIMED = 20
N_ERROR_POINTS = 10_000
N_ERROR_CHECKED = 200


def main():
    rng = np.random.default_rng(12345)

    t0 = time.perf_counter()
    table = K.build_table()
    t_build = time.perf_counter() - t0
    print(f"table build ({table.s.size} s points, 1s-3s): {t_build:.2f} s")

    mu = rng.uniform(0.05, 1.0, N_COMPOUNDS)[:, None]
    r0 = rng.uniform(5.0, 120.0, N_COMPOUNDS)[:, None]

    t0 = time.perf_counter()
    eb = K.keldysh_binding_ev(mu, r0, KAPPAS, table, "1s")
    t_table = time.perf_counter() - t0
    assert eb.shape == (N_COMPOUNDS, KAPPAS.size)

    idx = rng.choice(N_COMPOUNDS, N_DIRECT_TIMED, replace=False)
    t0 = time.perf_counter()
    direct = np.array([
        K.solve_levels_ev(mu[i, 0], r0[i, 0], KAPPAS[k % KAPPAS.size], n_states=1)[0][0]
        for k, i in enumerate(idx)
    ])
    t_sample = time.perf_counter() - t0
    n_total = N_COMPOUNDS * KAPPAS.size
    t_direct = t_sample / N_DIRECT_TIMED * n_total
    sample_err = np.max(np.abs(
        eb[idx, np.arange(N_DIRECT_TIMED) % KAPPAS.size] / direct - 1))

    print(f"table route: {n_total} binding energies in {t_table * 1e3:.1f} ms")
    print(f"direct route: {t_sample / N_DIRECT_TIMED * 1e3:.1f} ms per solve "
          f"({N_DIRECT_TIMED} timed), extrapolated {t_direct:.0f} s "
          f"= {t_direct / 3600:.2f} h for {n_total}")
    print(f"speedup: {t_direct / t_table:.3g}x")
    print(f"max rel. error, timed sample (dimensional solve vs table): {sample_err:.2e}")

    s = 10 ** rng.uniform(-4, 4, N_ERROR_POINTS)
    interp = {st: table.binding_ratio(s, st) for st in K.STATES}
    check = rng.choice(N_ERROR_POINTS, N_ERROR_CHECKED, replace=False)
    errors = {st: 0.0 for st in K.STATES}
    for j in check:
        f, _ = K.solve_reduced(s[j])
        for i, st in enumerate(K.STATES):
            errors[st] = max(errors[st], abs(interp[st][j] / f[i] - 1))
    print(f"max rel. interpolation error, {N_ERROR_CHECKED} of {N_ERROR_POINTS} random "
          "s in [1e-4, 1e4]: " + ", ".join(f"{st} {e:.1e}" for st, e in errors.items()))


if __name__ == "__main__":
    main()
