"""Make the shipped shell-transfer table topology/data/flat_transfer_shells.npz with CAMB.

    python -m topology.skies.make_transfer_table [--lmax 1024] [--kmax 1536] [--out PATH]

The table holds the weights g_s(k) of :mod:`topology.skies.transfer_shells` fitted to CAMB's
temperature transfer Delta_l(k) (topology.skies.transfer: every l, IntkAccuracyBoost 4) for the
package's default cosmology and primordial spectrum, over l = 2..lmax and k chi_rec up to kmax:
arrays k (k chi_rec), radii (units of chi_rec), g (n_k, n_shells), k_late, lmax, n_near and the
CAMB version. Flat skies with the terms sw + doppler + isw use it when camb is absent.
"""

from __future__ import annotations

import argparse
from importlib import resources
from pathlib import Path

import numpy as np

from . import transfer_shells as ts


def write_table(path: Path, lmax: int = ts.TABLE_LMAX, kmax: float = ts.TABLE_KMAX) -> ts.ShellTransfer:
    from importlib.metadata import version

    from ..cosmology import Cosmology

    st = ts.fit(Cosmology(), lmax, kmax)       # CAMB through topology.skies.transfer
    np.savez_compressed(path, k=st.k, radii=st.radii, g=st.g, k_late=st.k_late, lmax=st.lmax, n_near=st.n_near,
                        camb_version=np.array(version("camb")))
    return st


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description="Make the shipped shell-transfer table with CAMB (default cosmology).")
    ap.add_argument("--lmax", type=int, default=ts.TABLE_LMAX)
    ap.add_argument("--kmax", type=float, default=ts.TABLE_KMAX)
    ap.add_argument("--out", default=None)
    a = ap.parse_args(argv)
    out = Path(a.out) if a.out else Path(str(resources.files("topology").joinpath("data", ts.TABLE_NAME)))
    st = write_table(out, a.lmax, a.kmax)
    print(f"wrote {out}: {st.g.shape[0]} wave numbers x {st.g.shape[1]} shells, l <= {st.lmax}")


if __name__ == "__main__":
    main()
