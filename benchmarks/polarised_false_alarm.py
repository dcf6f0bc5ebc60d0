"""False-alarm rate of the E and T + E searches of `topology run` on fresh polarised null skies.

    python benchmarks/polarised_false_alarm.py [--field T+E] [--calibrate 39] [--fresh 60]
                                               [--false-alarm 0.1] [--cut 20]

The run's own tasks (topology.run.tasks.task_null) search ``--calibrate`` polarised isotropic skies
(CAMB TT, EE, TE; beam, noise on I and on Q, U; a |b| < cut mask; E made from the masked Q, U);
their S_max per radius set the whole-range threshold (topology.significance.thresholds, the
standardised-maximum look-elsewhere correction). ``--fresh`` skies of other seeds are searched
alike, and the fraction whose S_max exceeds the threshold at any radius is the measured
false-alarm rate: it should equal the nominal one within its binomial interval (one-sided exact
limits, Clopper & Pearson 1934, at 95% each side). Small settings (N_side 16, working N_side 8,
radii 20-60 deg) keep it to a few minutes on two cores.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np

from topology import significance as sig
from topology.config import load_config
from topology.run import tasks as T
from topology.run.plan import plan_from_config
from topology.skies.polarised import observe_polarised, polarised_sky, write_iqu_fits

CONFIG = """[[maps]]
name = "data"
path = "{path}"
field = "{field}"
[mask]
galactic_b_deg = {cut}
[instrument]
fwhm_deg = 8.0
noise_uk = 2.0
noise_pol_uk = 1.0
nside = 16
lmax = 32
terms = ["sw", "doppler", "isw"]
[search]
radii = "20:60:10"
nside_work = 8
fwhm_deg = 8.0
m_max = 8
centre_nside = 2
pol_apod_deg = 5.0
[significance]
n_null = {n_null}
false_alarm = {false_alarm}
injection_radii = "40:40:10"
seed = 5
[execution]
engine = "serial"
"""


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--field", default="T+E", choices=["E", "T+E"])
    ap.add_argument("--calibrate", type=int, default=39)
    ap.add_argument("--fresh", type=int, default=60)
    ap.add_argument("--false-alarm", type=float, default=0.1)
    ap.add_argument("--cut", type=float, default=20.0)
    a = ap.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="pol_fa_"))
    from topology.config import config_from_dict
    from topology.scenario import cosmology_from_config

    cosmo = cosmology_from_config(config_from_dict({"cosmology": {}}))
    iqu = observe_polarised(polarised_sky(cosmo, lmax=32, seed=1), nside=16, fwhm_deg=8.0, noise_uk=2.0,
                            noise_pol_uk=1.0, seed=1)
    write_iqu_fits(folder / "data.fits", iqu, [("POLCCONV", "COSMO", "")])
    cfg = folder / "run.toml"
    cfg.write_text(CONFIG.format(path=folder / "data.fits", field=a.field, cut=a.cut, n_null=a.calibrate,
                                 false_alarm=a.false_alarm))
    plan = plan_from_config(load_config(cfg), folder / "out")
    t0 = time.perf_counter()
    cal = np.array([T.task_null(plan, T.null_id(i))["s_max"] for i in range(a.calibrate)])
    fresh = np.array([T.task_null(plan, f"fresh/{j:05d}")["s_max"] for j in range(a.fresh)])
    elapsed = time.perf_counter() - t0
    cal = np.where(np.isfinite(cal), cal, -1.0)
    fresh = np.where(np.isfinite(fresh), fresh, -1.0)
    th = sig.thresholds(plan.radii_deg, cal, a.false_alarm)
    k = int(np.sum(np.any(fresh > th.whole_range, axis=1)))
    lo, hi = sig.clopper_pearson(k, a.fresh, 0.95)
    print(f"field {a.field}, |b| < {a.cut:g} deg, {a.calibrate} calibration and {a.fresh} fresh polarised null skies "
          f"({elapsed:.0f} s, {elapsed / (a.calibrate + a.fresh):.1f} s per sky)")
    print("radius (deg):        " + " ".join(f"{r:6.1f}" for r in plan.radii_deg))
    print("whole-range threshold " + " ".join(f"{v:6.3f}" for v in th.whole_range))
    print(f"fresh skies above it: {k} of {a.fresh} = {k / a.fresh:.3f}; 95% one-sided limits [{float(lo):.3f}, "
          f"{float(hi):.3f}]; nominal {a.false_alarm:g}: "
          f"{'consistent' if float(lo) <= a.false_alarm <= float(hi) else 'NOT consistent'}")


if __name__ == "__main__":
    main()
