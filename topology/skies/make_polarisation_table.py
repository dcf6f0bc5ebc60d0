"""Make the shipped EE/TE table topology/data/camb_unlensed_ee_te.txt with CAMB.

    python -m topology.skies.make_polarisation_table [--lmax 3100] [--out PATH]

The table holds CAMB's unlensed scalar EE and TE spectra (microK^2) for the package's default
cosmology and primordial spectrum, from the same CAMB run settings as the TT table
(topology.skies.make_spectrum_table): columns ell, C_EE, C_TE. The header records the CAMB
version and every parameter, so that the table can be checked against CAMB
(tests/test_skies_polarised.py) and remade.
"""

from __future__ import annotations

from . import polarised, spectra
from .make_spectrum_table import camb_settings, table_main

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
        *camb_settings(cosmo, lmax),
        "columns: ell  C_EE  C_TE [microK^2, thermodynamic]  (l = 0, 1 are 0)",
    ]
    lines = ["# " + h for h in head]
    lines += [f"{ell:d} {cl['EE'][ell]:.10e} {cl['TE'][ell]:.10e}" for ell in range(lmax + 1)]
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    return table_main(table_text, polarised.POL_TABLE_NAME, __doc__.splitlines()[0], argv)


if __name__ == "__main__":
    raise SystemExit(main())
