"""The free additive convolution of a law ν with the standard semicircle, computed independently
of freegap for its cross-checks (not a test itself).

For a semicircular summand the Cauchy transform of the sum is G(z) = G_ν(ω(z)) with the
subordination function ω(z) = z − G(z) (Biane 1997). It is iterated here as ω ← z − G_ν(ω) from
ω = z, damped by half (it converges where the plain iteration is slow), to 1e-14, at z = x + iε.
"""
import math


def semicircle_free_sum_density(g_nu, x, eps=1e-10):
    """Density at x of ν ⊞ semicircle, given ν's Cauchy transform g_nu(w) for Im w > 0."""
    z = complex(x, eps)
    omega = z
    for _ in range(50000):
        nxt = z - g_nu(omega)
        if abs(nxt - omega) < 1e-14:
            omega = nxt
            break
        omega = 0.5 * omega + 0.5 * nxt
    return -g_nu(omega).imag / math.pi
