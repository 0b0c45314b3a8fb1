#!/usr/bin/python3
"""Hand-written NumPy comparison point for one trial of B + U B U^* (the eigenvalues of a
free-sum-type model), written the way a user would write it.

One trial at size N:
  1. b = (+1 repeated N/2 times, -1 repeated N - N/2 times);
  2. U Haar unitary: complex Ginibre Z with E|z|^2 = 1 from rng.standard_normal, Z = QR by
     np.linalg.qr, then U = Q * (d/|d|) with d the diagonal of R (the phase fix; without it
     Q is not Haar distributed);
  3. M = B + U B U^*:
       naive (default, what users usually write): B = np.diag(b); M = B + U @ B @ U.conj().T
             (two dense complex products);
       --smart: M = (U * b) @ U.conj().T, then b added to the diagonal (one product);
  4. np.linalg.eigvalsh(M);
  5. np.histogram with 400 bins on [-2.5, 2.5].

Prints one JSON object on stdout: per-stage seconds per trial (median over the timed trials;
"total" is the median of the per-trial totals, not the sum of the stage medians).

The goal in the benchmark issue (freegap's trial time over this script's) is measured against
the NAIVE variant; --smart is reported alongside as the careful-user comparison.

Run with one BLAS thread, e.g.
  OPENBLAS_NUM_THREADS=1 /usr/bin/python3 tests/benchmarks/numpy_free_sum_trial.py 500 1000 2000
"""
import argparse
import json
import os
import platform
import statistics
import time

import numpy as np


def one_trial(n, rng, smart, edges):
    t = {}
    t0 = time.perf_counter()
    z = (rng.standard_normal((n, n)) + 1j * rng.standard_normal((n, n))) / np.sqrt(2.0)
    t1 = time.perf_counter()
    q, r = np.linalg.qr(z)
    d = np.diag(r)
    u = q * (d / np.abs(d))
    t2 = time.perf_counter()
    b = np.concatenate([np.ones(n // 2), -np.ones(n - n // 2)])
    if smart:
        m = (u * b) @ u.conj().T
        m[np.diag_indices(n)] += b
    else:
        bm = np.diag(b)
        m = bm + u @ bm @ u.conj().T
    t3 = time.perf_counter()
    ev = np.linalg.eigvalsh(m)
    t4 = time.perf_counter()
    counts, _ = np.histogram(ev, bins=edges)
    t5 = time.perf_counter()
    t["generate"] = t1 - t0
    t["qr_phase"] = t2 - t1
    t["sample"] = t2 - t0
    t["form"] = t3 - t2
    t["eigenvalues"] = t4 - t3
    t["histogram"] = t5 - t4
    t["total"] = t5 - t0
    # Sanity only (not timed): the spectrum of B + U B U^* lies in [-2, 2].
    t["_in_range"] = bool(counts.sum() == n)
    return t


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("sizes", nargs="+", type=int, help="matrix sizes N")
    ap.add_argument("--smart", action="store_true",
                    help="form M with one product (U*b) @ U^H plus the diagonal")
    ap.add_argument("--trials", type=int, default=7, help="timed trials per N below 2000")
    ap.add_argument("--trials-large", type=int, default=3, help="timed trials per N >= 2000")
    ap.add_argument("--warmup", type=int, default=1, help="untimed trials per N first")
    ap.add_argument("--seed", type=int, default=20261202)
    args = ap.parse_args()

    edges = np.linspace(-2.5, 2.5, 401)
    rng = np.random.default_rng(args.seed)
    results = []
    for n in args.sizes:
        trials = args.trials_large if n >= 2000 else args.trials
        for _ in range(args.warmup):
            one_trial(n, rng, args.smart, edges)
        rows = [one_trial(n, rng, args.smart, edges) for _ in range(trials)]
        keys = [k for k in rows[0] if not k.startswith("_")]
        results.append({
            "n": n,
            "trials": trials,
            "median_seconds": {k: statistics.median(r[k] for r in rows) for k in keys},
            "all_in_range": all(r["_in_range"] for r in rows),
        })
    print(json.dumps({
        "program": "numpy_free_sum_trial",
        "variant": "smart" if args.smart else "naive",
        "numpy": np.__version__,
        "python": platform.python_version(),
        "openblas_num_threads": os.environ.get("OPENBLAS_NUM_THREADS"),
        "results": results,
    }))


if __name__ == "__main__":
    main()
