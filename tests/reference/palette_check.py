"""Colour-vision check of the plot palette in src/report/svg.rs (PALETTE).

For normal vision and for full-severity deuteranomaly, protanomaly and
tritanomaly (Machado et al. 2009 simulation as implemented by colorspacious),
prints the smallest CAM02-UCS distance between any two palette colours.
Run: python3 tests/reference/palette_check.py   (needs numpy, colorspacious)
"""

import itertools

import colorspacious
import numpy as np
from colorspacious import cspace_convert

PALETTE = ["24589A", "E8A33A", "86C5EA", "B3472C", "2A8C6E", "CC79B0", "F2DE7A", "555555"]


def main():
    print("numpy", np.__version__, "colorspacious", colorspacious.__version__)
    rgb = np.array([[int(h[i : i + 2], 16) / 255 for i in (0, 2, 4)] for h in PALETTE])
    for cvd in (None, "deuteranomaly", "protanomaly", "tritanomaly"):
        if cvd is None:
            seen = rgb
        else:
            space = {"name": "sRGB1+CVD", "cvd_type": cvd, "severity": 100}
            seen = np.clip(cspace_convert(rgb, space, "sRGB1"), 0, 1)
        ucs = cspace_convert(seen, "sRGB1", "CAM02-UCS")
        d = min(
            (np.linalg.norm(ucs[a] - ucs[b]), PALETTE[a], PALETTE[b])
            for a, b in itertools.combinations(range(len(PALETTE)), 2)
        )
        print("%-14s smallest distance %.1f (%s vs %s)" % (cvd or "normal", *d))


if __name__ == "__main__":
    main()
