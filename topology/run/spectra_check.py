"""Do the injected skies carry the spectrum of the null skies? Per injected family and l band, the
mean angular power of its injected skies over that of the null skies, with the error of the
ratio from the skies' own scatter, and a warning where a band departs.

alpha_min compares injected skies with thresholds set by isotropic null skies; if the two differ
in power at the multipoles the search uses (a wave-number cut too low, a term missing from one
kind of sky), alpha_min measures that difference rather than the topology. A departure at low l
can be the topology itself (a space smaller than the last-scattering sphere lacks the longest
waves: the low-l suppression of small tori, e.g. de Oliveira-Costa & Smoot 1995); one at high l
cannot.

Power per sky: the full-sky C_l of the observed simulated map (beam, pixel window and noise
included, the same for nulls and injections), averaged over each band with weights 2l + 1.
Error of the ratio R = <C_b>_inj / <C_b>_null of the two means (delta method):
sigma_R = R sqrt(s_inj^2 / (N_inj <C_b>_inj^2) + s_null^2 / (N_null <C_b>_null^2)), s the
standard deviations over skies (which include the extra scatter of a multiply connected sky's
correlated a_lm). A band is flagged when |R - 1| > DEPARTURE_SIGMA sigma_R.
"""

from __future__ import annotations

import numpy as np

BAND_EDGES = (2, 5, 10, 20, 30, 50, 75, 100, 150, 200, 300, 400, 600, 800, 1200, 1600, 2400, 3200)
# flag a band at 3 sigma: with ~8-16 bands per family, 1 sigma would flag several bands of a run by
# chance alone (common practice: a multi-band consistency test uses a few sigma)
DEPARTURE_SIGMA = 3.0


def sky_power(values: np.ndarray, lmax: int) -> list[float]:
    """Full-sky C_l, l = 0..lmax, of a RING map (microK^2), for the task result."""
    import healpy as hp

    return [float(c) for c in hp.anafast(np.asarray(values, dtype=float), lmax=int(lmax), iter=1)]


def bands(lmax: int) -> list[tuple[int, int]]:
    """(l_lo, l_hi) inclusive bands of BAND_EDGES from l = 2 to ``lmax``."""
    edges = [e for e in BAND_EDGES if e <= lmax] + [lmax + 1]
    return [(lo, hi - 1) for lo, hi in zip(edges[:-1], edges[1:]) if hi - 1 >= lo]


def band_means(cl: np.ndarray, lmax: int) -> np.ndarray:
    """(n_skies, n_bands): the 2l+1 weighted mean C_l of each band, for C_l rows (n_skies, >= lmax+1)."""
    cl = np.atleast_2d(np.asarray(cl, dtype=float))
    out = []
    for lo, hi in bands(lmax):
        w = 2.0 * np.arange(lo, hi + 1) + 1.0
        out.append(cl[:, lo:hi + 1] @ w / w.sum())
    return np.array(out).T


def compare(null_cl: np.ndarray, injected: dict, lmax: int) -> list[dict]:
    """Rows {family, l_min, l_max, ratio, error, departure_sigma, departs} per family and band;
    ``injected`` maps a family label to its skies' C_l rows. Empty when there are fewer than two
    skies on either side (no scatter to judge by)."""
    nb = band_means(null_cl, lmax)
    if nb.shape[0] < 2:
        return []
    mean_n, var_n = nb.mean(axis=0), nb.var(axis=0, ddof=1) / nb.shape[0]
    rows = []
    for label, cl in injected.items():
        ib = band_means(cl, lmax)
        if ib.shape[0] < 2:
            continue
        mean_i, var_i = ib.mean(axis=0), ib.var(axis=0, ddof=1) / ib.shape[0]
        ratio = mean_i / mean_n
        error = np.abs(ratio) * np.sqrt(var_i / mean_i ** 2 + var_n / mean_n ** 2)
        dev = np.abs(ratio - 1.0) / np.where(error > 0, error, np.inf)
        for (lo, hi), r, e, d in zip(bands(lmax), ratio, error, dev):
            rows.append({"family": label, "l_min": lo, "l_max": hi, "ratio": float(r), "error": float(e),
                         "departure_sigma": float(d), "departs": bool(d > DEPARTURE_SIGMA)})
    return rows


def departure_notes(rows: list[dict]) -> list[str]:
    """One note per family with departing bands, naming them."""
    out = []
    for label in dict.fromkeys(r["family"] for r in rows):
        bad = [r for r in rows if r["family"] == label and r["departs"]]
        if not bad:
            continue
        text = ", ".join(f"l {r['l_min']}-{r['l_max']}: {r['ratio']:.3f} +- {r['error']:.3f}" for r in bad)
        out.append(f"the injected {label} skies' power departs from the null skies' by more than "
                   f"{DEPARTURE_SIGMA:g} sigma ({text}); at low l this can be the topology itself (a small space "
                   "lacks the longest waves), at high l it is a difference of spectra that alpha_min would absorb")
    return out
