"""Pooled spectra against a limit CDF, for the cross-checks (not a test itself).

The Kolmogorov distance of n pooled eigenvalues to a limit CDF tabulated by `freegap limit`
(limit.csv, linear between its points: the density is bounded where these checks use it, so the
interpolation error is far below the tolerance), and the tolerance the checks use: 1.63/√n, the
1 % point of the one-sample test for n independent values (Massey 1951; eigenvalues are more
regular than independent values, so it is conservative), plus 2/N for the O(1/N) bias of the
mean spectral distribution at matrix size N (Götze & Tikhomirov 2005 for a GUE, recalled from
memory).
"""
import math

import h5py
import numpy as np


def pooled_kolmogorov(values, xs, cdf):
    """sup |F_n − F| of the pooled values against the CDF table (xs, cdf)."""
    values = np.sort(np.asarray(values, dtype=float).ravel())
    f = np.interp(values, np.asarray(xs), np.asarray(cdf))
    n = values.size
    return max(np.max(np.arange(1, n + 1) / n - f), np.max(f - np.arange(n) / n))


def kolmogorov_bound(count, size):
    """Tolerance for `count` pooled eigenvalues of matrices of size `size` (module docstring)."""
    return 1.63 / math.sqrt(count) + 2.0 / size


def kept_spectra(run_file, size=None):
    """The kept spectra of a run file (one dataset per size, trials × N, whose name ends in
    "spectra"), as arrays; with `size`, only that size's."""
    out = []
    with h5py.File(run_file, "r") as h5:
        h5.visititems(lambda name, obj: out.append(np.asarray(obj))
                      if isinstance(obj, h5py.Dataset) and name.endswith("spectra") else None)
    return [s for s in out if size is None or (s.ndim == 2 and s.shape[1] == size)]
