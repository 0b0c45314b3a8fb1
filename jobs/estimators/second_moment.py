#!/usr/bin/env python3
"""An estimator for freegap's command bridge (docs/plugins.md), in plain Python.

Reads one trial (the eigenvalues of a sample covariance S) on standard input and writes the
moment estimate of the population's second moment, sigma2_hat = m2 - c*m1^2 with
m_k = (1/N) sum lambda^k and c = N/M (the job passes the ratio as a parameter; M = round(N/c) as
freegap's Wishart sampler makes it). The same formula as the built-in
population_second_moment's `second_moment`, so the two appear side by side in the scores.
"""
import sys


def main():
    lines = sys.stdin.read().split("\n")
    header = {}
    values = []
    i = 0
    while i < len(lines):
        words = lines[i].split(" ", 2)
        if words[0] == "parameter":
            header[words[1]] = words[2]
        elif words[0] == "values":
            count = int(words[1])
            values = [float(v) for v in lines[i + 1:i + 1 + count]]
            break
        elif len(words) == 2:
            header[words[0]] = words[1]
        i += 1
    n = len(values)
    m = max(1, round(n / float(header["ratio"])))
    m1 = sum(values) / n
    m2 = sum(v * v for v in values) / n
    print("second_moment %.17g" % (m2 - (n / m) * m1 * m1))


if __name__ == "__main__":
    main()
