"""Make the shipped EE/TE table topology/data/camb_unlensed_ee_te.txt with CAMB.

    python -m topology.skies.make_polarisation_table [--lmax 3100] [--out PATH]

The table holds CAMB's unlensed scalar EE and TE spectra (microK^2) for the package's default
cosmology and primordial spectrum, from the same CAMB run settings as the TT table
(topology.skies.make_spectrum_table): columns ell, C_EE, C_TE. The header records the CAMB
version and every parameter, so that the table can be checked against CAMB
(tests/test_skies_polarised.py) and remade.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from . import polarised, spectra

DEFAULT_LMAX = spectra.CAMB_LMAX_CALC


def table_text(lmax: int = DEFAULT_LMAX) -> str:
    import camb

    from ..cosmology import Cosmology

    cosmo = Cosmology()
    cl = polarised.camb_pol_cl(cosmo, lmax)
    head = [
        "topology: isotropic CMB E-mode and temperature-E spectra for the default cosmology",
        "made by: python -m topology.skies.make_polarisation_table --lmax %d" % lmax,
        f"CAMB version {camb.__version__}: get_unlensed_scalar_cls(CMB_unit='muK', raw_cl=True), EE and TE columns",
        "physics: all linear scalar terms; unlensed; no tensors (so B = 0)",
        (f"cosmology: H0 = {100 * cosmo.h}, ombh2 = {cosmo.omega_b_h2}, omch2 = {cosmo.omega_c_h2}, "
         f"omk = {cosmo.omega_k}, TCMB = {cosmo.t_cmb} K, nnu = {cosmo.n_eff} (massless, mnu = 0)"),
        (f"primordial: As = {spectra.A_S}, ns = {spectra.N_S}, pivot_scalar = {spectra.K_PIVOT} /Mpc, "
         f"tau = {spectra.TAU_REIO} (Planck 2018 VI Table 2)"),
        f"accuracy: set_for_lmax({lmax} + 50, lens_potential_accuracy=0), CAMB default accuracy",
        "columns: ell  C_EE  C_TE [microK^2, thermodynamic]  (l = 0, 1 are 0)",
    ]
    lines = ["# " + h for h in head]
    lines += [f"{ell:d} {cl['EE'][ell]:.10e} {cl['TE'][ell]:.10e}" for ell in range(lmax + 1)]
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--lmax", type=int, default=DEFAULT_LMAX)
    ap.add_argument("--out", default=str(Path(__file__).resolve().parents[1] / "data" / polarised.POL_TABLE_NAME))
    args = ap.parse_args(argv)
    text = table_text(args.lmax)
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    Path(args.out).write_text(text)
    print(f"wrote {args.out} (lmax {args.lmax})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
