#!/usr/bin/python3
# SPDX-License-Identifier: MIT
# Usage: /usr/bin/python3 fuzz/seeds/fits/write_epoch_arrays.py fuzz/seeds/fits/epoch_arrays.fits
# Writes fuzz/seeds/fits/epoch_arrays.fits: two invented sources with Gaia-epoch-like array
# columns, both variable-length (P) and fixed-length vector (12D) forms.
import sys, numpy as np
from astropy.io import fits
rng = np.random.default_rng(7)
n = 12
t = [np.sort(rng.uniform(1700, 2750, n)) for _ in range(2)]
mag = [11.2 + 0.3 * np.sin(2 * np.pi * ti / 5.3671) for ti in t]
flux = [10 ** (-0.4 * (m - 25.6874)) for m in mag]
def var(arrs):
    a = np.empty(2, dtype=object)
    for i, v in enumerate(arrs):
        a[i] = v
    return a
cols = [fits.Column(name="source_id", format="K", array=np.array([41012345, 41076543], dtype=np.int64)),
        fits.Column(name="g_transit_time", format="PD()", array=var(t)),
        fits.Column(name="g_transit_mag", format="PD()", array=var(mag)),
        fits.Column(name="g_transit_flux", format="12D", array=np.array(flux)),
        fits.Column(name="g_transit_flux_over_error", format="12E", array=np.full((2, n), 500.0, dtype=np.float32)),
        fits.Column(name="variability_flag_g_reject", format="PL()", array=var([np.zeros(n, bool), np.arange(n) % 5 == 0]))]
fits.BinTableHDU.from_columns(cols).writeto(sys.argv[1], overwrite=True)
