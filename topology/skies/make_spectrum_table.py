"""Make the shipped isotropic spectrum table topology/data/camb_unlensed_tt.txt with CAMB.

    python -m topology.skies.make_spectrum_table [--lmax 3100] [--out PATH]

The table holds CAMB's unlensed scalar TT spectrum (all linear terms: Sachs-Wolfe, Doppler,
early and late ISW, polarisation source; no lensing, no tensors) for the package's default
cosmology (topology.cosmology.Cosmology(): Planck 2018 VI Table 2 background, massless
neutrinos) and primordial spectrum (topology.skies.spectra: A_s, n_s, k_pivot, tau), with
columns ell and C_l in microK^2. The header records the CAMB version and every parameter, so
that the table can be checked against CAMB (tests/test_skies_isotropic.py) and remade.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from . import spectra

DEFAULT_LMAX = spectra.CAMB_LMAX_CALC


def table_text(lmax: int = DEFAULT_LMAX) -> str:
    import camb

    from ..cosmology import Cosmology

    cosmo = Cosmology()
    cl = spectra.camb_cl(cosmo, lmax)
    head = [
        "topology: isotropic CMB temperature spectrum for the default cosmology",
        "made by: python -m topology.skies.make_spectrum_table --lmax %d" % lmax,
        f"CAMB version {camb.__version__}: get_unlensed_scalar_cls(CMB_unit='muK', raw_cl=True), TT column",
        "terms: all linear scalar terms (SW, Doppler, early+late ISW, polarisation source); unlensed; no tensors",
        *camb_settings(cosmo, lmax),
        "columns: ell  C_ell [microK^2, thermodynamic]  (C_0 = C_1 = 0)",
    ]
    lines = ["# " + h for h in head]
    lines += [f"{ell:d} {cl[ell]:.10e}" for ell in range(lmax + 1)]
    return "\n".join(lines) + "\n"


def camb_settings(cosmo, lmax: int) -> list[str]:
    """Header lines of a shipped CAMB table: the cosmology, the primordial spectrum, the accuracy."""
    return [
        (f"cosmology: H0 = {100 * cosmo.h}, ombh2 = {cosmo.omega_b_h2}, omch2 = {cosmo.omega_c_h2}, "
         f"omk = {cosmo.omega_k}, TCMB = {cosmo.t_cmb} K, nnu = {cosmo.n_eff} (massless, mnu = 0)"),
        (f"primordial: As = {spectra.A_S}, ns = {spectra.N_S}, pivot_scalar = {spectra.K_PIVOT} /Mpc, "
         f"tau = {spectra.TAU_REIO} (Planck 2018 VI Table 2)"),
        f"accuracy: set_for_lmax({lmax} + 50, lens_potential_accuracy=0), CAMB default accuracy",
    ]


def table_main(make_text, name: str, description: str, argv=None) -> int:
    """The command line of a table maker: --lmax, --out (default topology/data/``name``)."""
    ap = argparse.ArgumentParser(description=description)
    ap.add_argument("--lmax", type=int, default=DEFAULT_LMAX)
    ap.add_argument("--out", default=str(Path(__file__).resolve().parents[1] / "data" / name))
    args = ap.parse_args(argv)
    text = make_text(args.lmax)
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    Path(args.out).write_text(text)
    print(f"wrote {args.out} (lmax {args.lmax})")
    return 0


def main(argv=None) -> int:
    return table_main(table_text, spectra.TABLE_NAME, __doc__.splitlines()[0], argv)


if __name__ == "__main__":
    raise SystemExit(main())
