#!/usr/bin/env python3
"""Exact finite-N moments m_k = E (1/N) Tr (A + U B U^*)^k, k = 1..4, for diagonal A, B and U
Haar on U(N) or O(N), by the Weingarten calculus. The numbers in tests/model/test_haar_columns.cpp
come from this script (run it to reproduce them; it needs only the standard library).

Sources:
  - unitary: Collins 2003 ("Moments and cumulants of polynomial random variables on unitary groups,
    the Itzykson-Zuber integral, and free probability"), Collins & Sniady 2006 ("Integration with
    respect to the Haar measure on unitary, orthogonal and symplectic group"):
      E[U_{i1 j1} U_{i2 j2} conj(U_{i'1 j'1}) conj(U_{i'2 j'2})]
        = sum over sigma, tau in S_2 of  prod_s delta(i_s, i'_{sigma(s)}) delta(j_s, j'_{tau(s)})
          * Wg(sigma tau^{-1}),
    with Wg the inverse of the Gram matrix G(sigma, tau) = N^{#cycles(sigma tau^{-1})}.
  - orthogonal: Collins & Sniady 2006 (also Collins & Matsumoto 2009):
      E[O_{i1 j1} ... O_{i4 j4}] = sum over pair partitions m, n of {1..4} of
          delta_m(i) delta_n(j) Wg^O(m, n),
    with Wg^O the inverse of the Gram matrix G(m, n) = N^{loops(m, n)}.
The script computes both Weingarten matrices by inverting the Gram matrices in exact rational
arithmetic and checks them against the closed forms (recalled from memory, and confirmed here by
that inversion): unitary Wg(id) = 1/(N^2 - 1), Wg(transposition) = -1/(N (N^2 - 1));
orthogonal Wg^O(m, m) = (N + 1)/(N (N - 1)(N + 2)), Wg^O(m, n != m) = -1/(N (N - 1)(N + 2)).

A product of at most two blocks U B^p U^* (consecutive X = U B U^* merge, as U^* U = I) needs
only two U and two U^*, which is all moments up to 4 need.

Usage: python3 weingarten_moments.py   (prints the table the test holds)
"""

from fractions import Fraction
from itertools import product

PAIRINGS = [((0, 1), (2, 3)), ((0, 2), (1, 3)), ((0, 3), (1, 2))]


def invert(matrix):
    """Inverse of a small square matrix of Fractions (Gauss-Jordan)."""
    n = len(matrix)
    a = [list(row) + [Fraction(int(i == j)) for j in range(n)] for i, row in enumerate(matrix)]
    for c in range(n):
        p = next(r for r in range(c, n) if a[r][c] != 0)
        a[c], a[p] = a[p], a[c]
        pivot = a[c][c]
        a[c] = [x / pivot for x in a[c]]
        for r in range(n):
            if r != c and a[r][c] != 0:
                f = a[r][c]
                a[r] = [x - f * y for x, y in zip(a[r], a[c])]
    return [row[n:] for row in a]


def loops(m, n):
    """Number of loops of the graph on {0..3} whose edges are the pairs of m and of n."""
    parent = list(range(4))

    def find(x):
        while parent[x] != x:
            x = parent[x]
        return x

    for a, b in list(m) + list(n):
        parent[find(a)] = find(b)
    return len({find(x) for x in range(4)})


def unitary_wg(N):
    # S_2 = {id, (12)}: sigma tau^{-1} is id (2 cycles) when sigma = tau, else (12) (1 cycle).
    g = [[Fraction(N) ** 2, Fraction(N)], [Fraction(N), Fraction(N) ** 2]]
    w = invert(g)
    assert w[0][0] == Fraction(1, N * N - 1)
    assert w[0][1] == Fraction(-1, N * (N * N - 1))
    return w  # w[s][t] for s, t in {0: id, 1: (12)}


def orthogonal_wg(N):
    g = [[Fraction(N) ** loops(m, n) for n in PAIRINGS] for m in PAIRINGS]
    w = invert(g)
    d = N * (N - 1) * (N + 2)
    for i in range(3):
        for j in range(3):
            assert w[i][j] == (Fraction(N + 1, d) if i == j else Fraction(-1, d))
    return w


def two_blocks(group, a1, b1, a2, b2):
    """E Tr(A1 U B1 U^* A2 U B2 U^*) for diagonals given as lists."""
    N = len(a1)
    total = Fraction(0)
    if group == "unitary":
        wg = unitary_wg(N)
        perms = [(0, 1), (1, 0)]
        # sum_{i j k l} a1_i b1_j a2_k b2_l U_ij conj(U_kj) U_kl conj(U_il):
        # U entries (i, j), (k, l); conjugated entries (k, j), (i, l).
        for i, j, k, l in product(range(N), repeat=4):
            rows, cols = (i, k), (j, l)
            crow, ccol = (k, i), (j, l)
            e = Fraction(0)
            for s, sigma in enumerate(perms):
                if not all(rows[x] == crow[sigma[x]] for x in range(2)):
                    continue
                for t, tau in enumerate(perms):
                    if all(cols[x] == ccol[tau[x]] for x in range(2)):
                        e += wg[0][0] if s == t else wg[0][1]
            if e:
                total += a1[i] * b1[j] * a2[k] * b2[l] * e
        return total
    wg = orthogonal_wg(N)
    # O_ij O_kj O_kl O_il: row indices (i, k, k, i), column indices (j, j, l, l).
    for i, j, k, l in product(range(N), repeat=4):
        rows, cols = (i, k, k, i), (j, j, l, l)
        e = Fraction(0)
        for mi, m in enumerate(PAIRINGS):
            if not all(rows[x] == rows[y] for x, y in m):
                continue
            for ni, n in enumerate(PAIRINGS):
                if all(cols[x] == cols[y] for x, y in n):
                    e += wg[mi][ni]
        if e:
            total += a1[i] * b1[j] * a2[k] * b2[l] * e
    return total


def power(d, p):
    return [x ** p for x in d]


def moment(group, a, b, k):
    """E (1/N) Tr (A + X)^k, X = U B U^*, summed over the 2^k words in A and X."""
    N = len(a)
    total = Fraction(0)
    for word in product("AX", repeat=k):
        if "X" not in word:
            total += sum(power(a, k))
            continue
        # Rotate so the word starts with X, then read blocks X^p A^q.
        start = word.index("X")
        w = word[start:] + word[:start]
        blocks = []
        i = 0
        while i < k:
            p = 0
            while i < k and w[i] == "X":
                p, i = p + 1, i + 1
            q = 0
            while i < k and w[i] == "A":
                q, i = q + 1, i + 1
            blocks.append((p, q))
        if len(blocks) == 1:
            (p, q), = blocks
            total += sum(power(a, q)) * sum(power(b, p)) / N  # E U B^p U^* = tr(B^p) I
        else:
            (p1, q1), (p2, q2) = blocks
            total += two_blocks(group, power(a, q2), power(b, p1), power(a, q1), power(b, p2))
    return total / N


CASES = [
    # (group, N, diagonal of B = A, as the sampler places the atoms)
    ("unitary", 4, [1, 1, 0, -1]),
    ("unitary", 6, [1, 1, 1, -1, -1, -1]),
    ("unitary", 10, [1] * 5 + [-1] * 3 + [3] * 2),
    ("orthogonal", 4, [1, 1, 0, -1]),
    ("orthogonal", 6, [1, 1, 1, -1, -1, -1]),
    ("orthogonal", 10, [1] * 5 + [-1] * 3 + [3] * 2),
]


def main():
    for group, N, d in CASES:
        b = [Fraction(x) for x in d]
        ms = [moment(group, b, b, k) for k in range(1, 5)]
        text = ", ".join(f"{float(m):.17g}" for m in ms)
        exact = ", ".join(str(m) for m in ms)
        print(f"{group:10s} N = {N:2d}: {{{text}}}  // {exact}")


if __name__ == "__main__":
    main()
