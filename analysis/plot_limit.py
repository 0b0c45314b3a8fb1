#!/usr/bin/python3
"""Plot the limit law written by `freegap limit`: density and CDF against x, support edges marked.

Usage: plot_limit.py CSV OUT_PREFIX TITLE LO HI   (writes OUT_PREFIX.png and OUT_PREFIX.svg)
Run with Debian's /usr/bin/python3 (numpy and matplotlib).
"""
import sys

import numpy as np


def main(argv):
    if len(argv) != 6:
        print(__doc__, file=sys.stderr)
        return 2
    csv, prefix, title, lo, hi = argv[1], argv[2], argv[3], float(argv[4]), float(argv[5])
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    data = np.genfromtxt(csv, delimiter=",", names=True)
    x, density, cdf = data["x"], data["density"], data["cdf"]
    bad = ~np.isfinite(density)

    fig, (top, bottom) = plt.subplots(2, 1, figsize=(7.5, 6.5), sharex=True,
                                      gridspec_kw={"height_ratios": [3, 2]})
    top.plot(x[~bad], density[~bad], color="tab:blue", lw=1.6, label="limit density")
    if bad.any():
        top.plot(x[bad], np.zeros(bad.sum()), "x", color="tab:red",
                 label="solver did not converge")
    for edge, name in ((lo, "support edges"), (hi, None)):
        top.axvline(edge, color="0.4", ls="--", lw=1.0, label=name)
        bottom.axvline(edge, color="0.4", ls="--", lw=1.0)
    top.set_ylabel("density")
    top.set_title(title)
    top.legend(loc="upper right", fontsize=9)
    top.set_ylim(bottom=0.0)
    bottom.plot(x, cdf, color="tab:green", lw=1.6, label="limit CDF")
    bottom.set_xlabel("x (eigenvalue)")
    bottom.set_ylabel("CDF")
    bottom.set_ylim(-0.02, 1.02)
    bottom.legend(loc="lower right", fontsize=9)
    fig.tight_layout()
    fig.savefig(prefix + ".png", dpi=120)
    fig.savefig(prefix + ".svg")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
