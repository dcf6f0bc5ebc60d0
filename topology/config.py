"""Load and validate TOML configs: the one place that knows every section, key and default.

A config is a TOML file of sections. Each known section has a schema here: the keys it takes,
their types and defaults, and a line of documentation (printed by ``topology keys``). Unknown
sections and keys are errors with a did-you-mean; wrong types are errors that name the key.
Family-specific keys of ``[space]`` are checked by :mod:`topology.spaces.registry`.
:func:`load_config` reads and checks against the schema only; this module imports nothing of
the project but the leaf modules errors and bandlimit. What needs the theory (the background, spaces, observers) is checked
where it is built: :func:`topology.scenario.check_config` for every command, and the run plan
(:mod:`topology.run.plan`) for inline skies and ``[bounds] families``.
"""

from __future__ import annotations

import difflib
import math
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

try:  # Python >= 3.11
    import tomllib as _toml
except ModuleNotFoundError:  # pragma: no cover - Python 3.10
    import tomli as _toml

from .bandlimit import check_band_limit
from .errors import InputError

NUMBER = (int, float)


@dataclass(frozen=True)
class Key:
    types: tuple
    default: object
    doc: str
    check: object = None  # callable(value) -> error string or None


def _positive(v):
    return None if v > 0 else "must be positive"


def _at_least_two(v):
    return None if v >= 2 else "must be at least 2"


def _non_negative(v):
    return None if v >= 0 else "must not be negative"


def _power_of_two(v):
    return None if v >= 1 and (v & (v - 1)) == 0 else "must be a power of two"


def _euler(v):
    return None if len(v) == 3 else "needs three Euler angles (z-y-z, degrees)"


# Every section and key the package reads. Issues that add stages add their sections here.
SCHEMA: dict[str, dict[str, Key]] = {
    "cosmology": {
        "h": Key(NUMBER, 0.6736, "H0 / (100 km/s/Mpc); default Planck 2018 VI Table 2"),
        "omega_b_h2": Key(NUMBER, 0.02237, "physical baryon density omega_b h^2", _positive),
        "omega_c_h2": Key(NUMBER, 0.1200, "physical cold dark matter density omega_c h^2", _non_negative),
        "omega_k": Key(NUMBER, 0.0, "curvature density Omega_K (< 0 closed, > 0 open); Omega_Lambda = 1 - Omega_m - Omega_r - Omega_K"),
        "omega_lambda": Key(NUMBER, None, "alternative to omega_k: Omega_Lambda, with Omega_K taking up the difference"),
        "t_cmb": Key(NUMBER, 2.7255, "CMB temperature in K (Fixsen 2009)", _positive),
        "n_eff": Key(NUMBER, 3.046, "effective number of massless neutrino species", _non_negative),
        "z_star": Key(NUMBER, None, "redshift of last scattering; default: Hu & Sugiyama 1996 fit", _positive),
    },
    "space": {
        "family": Key((str,), None, "E1..E17, lens, prism, tetrahedral, octahedral, dodecahedral, hyperbolic (or isotropic for a sky)"),
        "lengths": Key((list,), None, "flat families: lattice translations in the plane, then the screw translation"),
        "angles": Key((list,), None, "E1: lattice angles [alpha, beta, gamma] in degrees (default 90, 90, 90)"),
        "angle": Key(NUMBER, None, "E2, E11...: angle between the two plane translations in degrees (default 90)"),
        "tilt": Key(NUMBER, None, "E7, E8, E13: angle in degrees between the glide axis and the mirror-plane lattice translation (default 90)"),
        "length_unit": Key((str,), "chi_rec", "unit of lengths and flat observer positions: 'chi_rec' or 'Mpc'"),
        "p": Key((int,), None, "lens space L(p, q): order p"),
        "q": Key((int,), None, "lens space L(p, q): 0 < q < p, coprime to p"),
        "m": Key((int,), None, "prism space S^3/D*_m: m >= 2 (group order 4m)"),
        "generators": Key((str,), None, "hyperbolic: JSON or TOML file of SO(3,1) generator matrices"),
    },
    "observer": {
        "position": Key((list,), None, "flat: [x, y, z] in length_unit; spherical: [w, x, y, z] on S^3 (normalised); "
                                       "hyperbolic: [x, y, z] in the Poincare ball or [t, x, y, z] on the hyperboloid"),
        "orientation": Key((list,), [0.0, 0.0, 0.0], "Euler angles z-y-z in degrees of the sky frame relative to the space", _euler),
    },
    # [sky]: owned by the synthetic-sky stage (topology/skies); edit only inside this block
    "sky": {
        "nside": Key((int,), 64, "HEALPix N_side of the output map: a power of two, 1..4096",
                     lambda v: None if 1 <= v <= 4096 and (v & (v - 1)) == 0 else "must be a power of two in 1..4096"),
        "lmax": Key((int,), None, "highest multipole of the sky, <= 3 nside - 1; default 2 nside", _non_negative),
        "seed": Key((int,), 0, "random seed (>= 0); signal and noise use independent streams of it", _non_negative),
        "method": Key((str,), "auto", "multiply connected skies: 'eigenmode', 'grid' (flat only) or 'auto' "
                                      "(flat: eigenmode for lmax <= 64, grid above; spherical: eigenmode)",
                      lambda v: None if v in ("eigenmode", "grid", "auto") else "must be 'eigenmode', 'grid' or 'auto'"),
        "terms": Key((list,), ["sw"], "temperature terms, a list from 'sw', 'doppler', 'isw' (must include 'sw'); "
                                      "isotropic skies take ['sw'] or all three",
                     lambda v: None if v and all(t in ("sw", "doppler", "isw") for t in v) and "sw" in v
                     and len(set(v)) == len(v) else "must be a list of distinct 'sw', 'doppler', 'isw' including 'sw'"),
        "fwhm_deg": Key(NUMBER, 0.0, "Gaussian beam FWHM in degrees (0: no beam)", _non_negative),
        "noise_uk": Key(NUMBER, 0.0, "white noise rms per pixel in microK (0: none)", _non_negative),
        "kmax": Key((int,), None, "spherical skies: highest harmonic degree k of S^3 modes; "
                                  "default ceil(2 lmax / (chi_rec / R_c))", _positive),
        "pixwin": Key((bool,), True, "apply the HEALPix pixel window of nside"),
        "mask": Key((str,), "none", "'none' or 'galactic' (|b| < mask_b_deg masked), written alongside the map",
                    lambda v: None if v in ("none", "galactic") else "must be 'none' or 'galactic'"),
        "mask_b_deg": Key(NUMBER, 20.0, "galactic mask: half-width of the masked band in degrees of latitude",
                          lambda v: None if 0 < v < 90 else "must be in (0, 90) degrees"),
        "apply_mask": Key((bool,), False, "set masked pixels of the map itself to UNSEEN (default: full sky)"),
        "hits": Key((str,), None, "HEALPix FITS hit-count map: noise_uk scaled by 1/sqrt(hits/mean hits) "
                                  "(path relative to the config)"),
        "polarisation": Key((bool,), False, "write I, Q, U (three columns, microK) instead of T; isotropic skies "
                                            "and flat spaces E1-E17 (eigenmode sum, needs camb), with terms "
                                            "['sw', 'doppler', 'isw'] (CAMB TT, EE, TE)"),
        "noise_pol_uk": Key(NUMBER, None, "white noise rms per pixel on each of Q and U in microK "
                                          "(default sqrt(2) noise_uk)", _non_negative),
        "qu_convention": Key((str,), "healpix", "Q/U sign convention of the output: 'healpix' (FITS POLCCONV "
                                                "'COSMO') or 'iau' (U negated)",
                             lambda v: None if v in ("healpix", "iau") else "must be 'healpix' or 'iau'"),
    },
    # [search]: owned by the search stage (topology/search); edit only inside this block
    "search": {
        "mode": Key((str,), "antipodal", "search mode: antipodal, all-pairs or targeted (the family of [space])"),
        "radii": Key((str,), "5:90:1", "circle radii START:STOP:STEP in degrees, both ends included (0 < r <= 90)"),
        "fwhm_deg": Key(NUMBER, 1.0, "Gaussian smoothing of the working map, FWHM in degrees", _non_negative),
        "nside_work": Key((int,), 128, "working N_side (the map is degraded to it harmonically)", _power_of_two),
        "m_max": Key((int,), 64, "largest Fourier mode m of a circle (<= 3 nside_work - 1)", _positive),
        "n_phi": Key((int,), None, "samples per circle (default: enough for the smoothed map's band limit; at least 2 m_max + 1)", _positive),
        "centre_nside": Key((int,), 16, "N_side of the coarse centre grid (refined by factors 2 to FWHM/2)", _power_of_two),
        "level_smoothing": Key(NUMBER, 1.2, "coarse levels smooth to max(FWHM, this * grid step)", _positive),
        "n_keep": Key((int,), 64, "candidates per radius and orientation kept between levels", _positive),
        "n_pool": Key((int,), 8, "all-pairs: n_pool * n_keep best coarse pairs before removing neighbours", _positive),
        "n_partners": Key((int,), 2, "all-pairs on a cut sky: best partners of every coarse centre passed on", _positive),
        "n_report": Key((int,), 3, "candidates per radius and orientation in the output", _positive),
        "n_candidates": Key((int,), 20, "best candidates overall in the output", _positive),
        "min_kept": Key(NUMBER, 0.5, "circles with a smaller unmasked fraction are skipped (and counted)", _positive),
        "min_overlap": Key(NUMBER, 0.25, "masked S needs this fraction of samples kept by both circles", _positive),
        "min_separation_deg": Key(NUMBER, 10.0, "all-pairs: centres closer than this (deg) are not a pair", _non_negative),
        "twist_oversample": Key(NUMBER, 2.0, "coarse twist grid: this * (m_cut + 1) twists", _positive),
        "power_fraction": Key(NUMBER, 0.999, "the m cut-off keeps this fraction of the m-weighted circle power",
                              _positive),
        "kernel_mem_mb": Key((int,), 128, "memory bound of one block of the all-pairs kernel (MB)", _positive),
        "l_range": Key((list,), None, "[l_min, l_max]: keep only these multipoles"),
        "l_weights": Key((str,), None, "text file of filter weights u_l, one per line from l = 0"),
        "ordering": Key((str,), None, "RING or NESTED for FITS files without an ORDERING header key"),
        "mask_threshold": Key(NUMBER, 0.5, "apodised masks: pixels with weight >= this count as kept", _positive),
        "orientation_nside": Key((int,), 4, "targeted: N_side of the coarse orientation grid (z axis directions)", _power_of_two),
        "positions": Key((list,), None, "targeted: observer positions to scan (default: [observer] position)"),
        "rho_t": Key(NUMBER, 1.0, "T+E: expected S of a true pair in T (weight rho / sigma^2; "
                     "topology.search.polarised)", _non_negative),
        "rho_e": Key(NUMBER, 0.75, "T+E: expected S of a true pair in E (Riazuelo et al. 2006, noise-free; "
                     "lower it for noise)", _non_negative),
        "pol_apod_deg": Key(NUMBER, 5.0, "E and T+E: cosine apodisation of the polarisation mask before E is "
                            "made (deg); E is searched beyond it", _non_negative),
        "targets": Key((list,), None, "topology run, targeted mode: spaces to test, tables in the [space] format "
                                     "(optionally with an observer position), e.g. [{family = \"lens\", p = 8, q = 1}]"),
    },
}


def _unit_interval(v):
    return None if 0.0 < v < 1.0 else "must be in (0, 1)"


# Sections of `topology run` (the main job). [[maps]] is an array of tables.
SCHEMA.update({
    "maps": {
        "name": Key((str,), None, "name of the map in the report (letters, digits, - and _)"),
        "path": Key((str,), None, "HEALPix FITS file (path relative to the config); or give an inline sky instead"),
        "field": Key((int, str), 0, "column of a multi-column map: index or name (default the first, temperature); "
                                    "E or T+E: the E map of the file's Q, U, or T and E combined (topology.search.polarised)"),
        "ordering": Key((str,), None, "RING or NESTED when the FITS header has no ORDERING key"),
        "pol_convention": Key((str,), None, "field E or T+E: Q/U convention of a file without a POLCCONV header key, "
                              "\"healpix\" or \"iau\" (never guessed)"),
        "space": Key((dict,), None, "inline synthetic sky: a [space] table (family and parameters, or isotropic)"),
        "observer": Key((dict,), None, "inline synthetic sky: an [observer] table"),
        "sky": Key((dict,), None, "inline synthetic sky: [sky] keys (seed, lmax ...); beam and noise come from [instrument]"),
    },
    "mask": {
        "path": Key((str,), None, "HEALPix FITS mask (1 kept, 0 masked, or apodised weights), any N_side"),
        "galactic_b_deg": Key(NUMBER, None, "instead of a file: mask the band |b| < this (degrees)", _positive),
        "ordering": Key((str,), None, "RING or NESTED when the FITS header has no ORDERING key"),
        "min_sky_fraction": Key(NUMBER, 0.2, "refuse a mask that keeps less of the sky than this", _unit_interval),
    },
    "instrument": {
        "fwhm_deg": Key(NUMBER, 1.0, "beam FWHM of the maps in degrees (null and injected skies get it)", _non_negative),
        "noise_uk": Key(NUMBER, 0.0, "white noise rms per pixel in microK (null and injected skies)", _non_negative),
        "noise_pol_uk": Key(NUMBER, None, "maps of field E or T+E: white noise rms per pixel on each of Q and U of "
                            "the null and injected skies in microK (default sqrt(2) noise_uk)", _non_negative),
        "nside": Key((int,), None, "N_side of null and injected skies (default: that of the first map)", _power_of_two),
        "lmax": Key((int,), None, "highest multipole of null and injected skies (default 2 nside)", _positive),
        "terms": Key((list,), ["sw"], "temperature terms of null and injected skies: ['sw'] or ['sw', 'doppler', 'isw']"),
    },
    "significance": {
        "n_null": Key((int,), 100, "isotropic null skies searched like the data", _positive),
        "false_alarm": Key(NUMBER, 0.05, "false-alarm probability of a detection over the whole radius range", _unit_interval),
        "efficiency_level": Key(NUMBER, 0.9, "detection efficiency that defines alpha_min: the one-sided lower "
                                "limit (Clopper-Pearson, at efficiency_confidence) must reach it", _unit_interval),
        "efficiency_confidence": Key(NUMBER, 0.95, "confidence of the one-sided exact binomial lower limit on the "
                                     "efficiency (n of n recovered give (1 - c)^(1/n))", _unit_interval),
        "seed": Key((int,), 0, "run seed: every null and injected sky derives its seed from it and its task id", _non_negative),
        "injection_radii": Key((str,), "15:75:10", "radii of injected circles START:STOP:STEP (degrees, < 90)"),
        "n_injections": Key((int,), 30, "injected skies per radius and per injected family", _positive),
        "injection_families": Key((list,), ["E1", {"family": "E2", "lengths": [1.0, 1.0, 0.5]}],
                                  "families of the injected skies, each with its own efficiency curve and alpha_min: "
                                  "'E1' (cubic torus) or compact flat or spherical families in the [space] format, "
                                  "scaled so their largest circles have the injected radius, seen from random "
                                  "observers (default: the cubic torus, back-to-back pairs, and a half-turn space "
                                  "E2 whose largest pairs are not back to back from off-axis observers)"),
        "injection_family": Key((str, dict), None, "one injected family (the same as injection_families = [it]; "
                                "give one of the two keys)"),
        "radius_tolerance_deg": Key(NUMBER, None, "an injected circle counts as found within this of its radius (default one radius step)", _non_negative),
    },
    "bounds": {
        "families": Key((list,), [], "family specs in the [space] format (plus optional position, orientation) to test"),
        "p_max": Key((int,), 20, "lens spaces L(p, q) in the bound table up to this p", _at_least_two),
        "m_max": Key((int,), 10, "prism spaces D*_m in the bound table up to this m", _at_least_two),
    },
    "output": {
        "dir": Key((str,), "report", "report folder (relative to the current folder)"),
    },
    "execution": {
        "engine": Key((str,), "local", "serial, local (process pool, one worker per core) or dask"),
        "workers": Key((int,), None, "number of workers (default: the number of cores)", _positive),
        "scheduler": Key((str,), None, "dask: address of a running scheduler, e.g. tcp://host:8786"),
    },
})


def _scales_problem(v):
    if not v or not all(type_ok(x, NUMBER) and math.isfinite(x) and x > 0 for x in v):
        return "must be a non-empty list of positive numbers"
    return None if len(v) <= 200 else "takes at most 200 scales"


def _terms_problem(v):
    ok = all(isinstance(t, str) for t in v) and sorted(v) in (["sw"], ["doppler", "isw", "sw"])
    return None if ok else "must be [\"sw\"] or [\"sw\", \"doppler\", \"isw\"]"


# [harmonic]: owned by the harmonic view (topology/harmonic); edit only inside this block
SCHEMA["harmonic"] = {
    "lmax": Key((int,), 10, "highest multipole of the real a_lm compared (l = 2..lmax, at most 50)",
                lambda v: None if 2 <= v <= 50 else "must be in 2..50"),
    "scales": Key((list,), None, "factors multiplying the [space] lengths and the [observer] position (spherical "
                                 "spaces: the curvature radius, Omega_K / scale^2): one divergence per scale "
                                 "(table, figure)", _scales_problem),
    "kchi_max": Key(NUMBER, None, "wave-number cut k chi_rec of the space's modes (default 3 lmax + 10; spherical: "
                                  "S^3 degrees k <= kchi_max / (chi_rec/R_c), default 2 lmax)", _positive),
    "terms": Key((list,), ["sw"], "temperature terms: ['sw'] (Sachs-Wolfe) or ['sw', 'doppler', 'isw'] (CAMB "
                                  "transfer)", _terms_problem),
    "complement": Key((bool,), True, "add the isotropic power of the modes beyond kchi_max on the diagonal "
                                     "(false: the pure cut, singular for small spaces; spherical: exactly the "
                                     "skies' degrees and tail weights)"),
    "nside": Key((int,), None, "N_side of the pixel-space divergence (with noise_uk, mask, beam); default: "
                               "full-sky a_lm without noise", _power_of_two),
    "noise_uk": Key(NUMBER, 0.0, "white noise rms per pixel of N_side in microK (needs nside)", _non_negative),
    "mask": Key((str,), "none", "'none' or 'galactic' (|b| < mask_b_deg masked; needs nside and noise_uk)",
                lambda v: None if v in ("none", "galactic") else "must be 'none' or 'galactic'"),
    "mask_b_deg": Key(NUMBER, 20.0, "galactic mask: half-width of the masked band in degrees of latitude",
                      lambda v: None if 0 < v < 90 else "must be in (0, 90) degrees"),
    "fwhm_deg": Key(NUMBER, 0.0, "Gaussian beam FWHM in degrees of the pixel-space maps", _non_negative),
    "pixwin": Key((bool,), True, "pixel-space maps carry the HEALPix pixel window of nside"),
    "level": Key(NUMBER, 0.95, "--map: a scale is excluded when a space of that scale gives a smaller likelihood "
                               "ratio with probability 1 - level (calibrated on simulated maps)",
                 lambda v: None if 0 < v < 1 else "must be in (0, 1)"),
    "n_cal": Key((int,), 200, "--map: simulated maps per scale (and isotropic maps) of the calibration",
                 lambda v: None if 10 <= v <= 100000 else "must be in 10..100000"),
    "orientation": Key((str,), "max", "--map: 'max' (profile) or 'marginal' (mean) likelihood over the orientation "
                                      "grid", lambda v: None if v in ("max", "marginal") else "must be 'max' or 'marginal'"),
    "orientation_nside": Key((int,), 1, "--map: the grid's z axes at the 12 nside^2 HEALPix pixel centres",
                             _power_of_two),
    "n_psi": Key((int,), 6, "--map: rotations about each z axis of the grid", _positive),
    "seed": Key((int,), 0, "--map: seed of the calibration maps", _non_negative),
}


def radii_problem(text, *, below_90: bool = False) -> str | None:
    """What is wrong with a radii string 'START:STOP:STEP' (degrees, both ends included) or a
    single radius, or None. Radii lie in (0, 90] (below 90 when ``below_90``)."""
    parts = str(text).split(":")
    try:
        nums = [float(v) for v in parts]
    except ValueError:
        nums = None
    if nums is None or len(nums) not in (1, 3):
        return "expected START:STOP:STEP in degrees (or one radius)"
    if not all(math.isfinite(v) for v in nums):
        return "radii must be finite numbers of degrees"
    if len(nums) == 3:
        start, stop, step = nums
        if not step > 0:
            return "needs STEP > 0"
        if stop < start:
            return "needs START <= STOP"
        if (stop - start) / step > 100_000:
            return "more than 100000 radii"
        nums = [start, start + math.floor((stop - start) / step + 1e-9) * step]
    if min(nums) <= 0 or max(nums) > 90:
        return "radii must lie in (0, 90] degrees"
    if below_90 and max(nums) >= 90:
        return "injected circles need radii below 90 degrees"
    return None


# Checks that need more than a key's own schema entry, kept outside the section blocks:
# (section, key) -> callable(value) -> error string or None
EXTRA_CHECKS = {
    ("search", "radii"): radii_problem,
    ("significance", "injection_radii"): lambda v: radii_problem(v, below_90=True),
}


def _cross_check(name: str, entry: dict, where: str) -> None:
    """Checks between keys of one table: lmax <= 3 nside - 1 (HEALPix band limit, common practice)."""
    if name in ("sky", "instrument", "harmonic") and isinstance(entry.get("nside"), int) \
            and isinstance(entry.get("lmax"), int):
        check_band_limit(entry["lmax"], entry["nside"], f"{where}: [{name}] lmax")


def toml_loads(text: str) -> dict:
    """TOML text to a dict; a leading UTF-8 byte-order mark (written by some editors) is dropped."""
    return _toml.loads(text.removeprefix("\ufeff"))


@dataclass
class Config:
    """A validated config: ``sections`` maps section name -> dict of given keys."""

    sections: dict
    path: Path | None = None

    @property
    def base_dir(self) -> Path:
        return self.path.parent if self.path else Path.cwd()

    def get(self, section: str, key: str, default=None):
        """A key's value, else its schema default, else ``default``."""
        sec = self.sections.get(section, {})
        if key in sec:
            return sec[key]
        k = SCHEMA.get(section, {}).get(key)
        return k.default if k is not None and k.default is not None else default

    def section(self, name: str) -> dict:
        return dict(self.sections.get(name, {}))

    def has(self, name: str) -> bool:
        return name in self.sections


def did_you_mean(word: str, options) -> str:
    close = difflib.get_close_matches(word, sorted(options), n=1)
    return f" (did you mean {close[0]!r}?)" if close else ""


def type_ok(value, types) -> bool:
    if isinstance(value, bool):
        return bool in types
    return isinstance(value, types)


def validate(data: dict, where: str = "config") -> dict:
    """Check sections and keys against :data:`SCHEMA`; return the data unchanged."""
    for name, sec in data.items():
        if name not in SCHEMA:
            raise InputError(f"unknown section [{name}]{did_you_mean(name, SCHEMA)}", where)
        schema = SCHEMA[name]
        entries = sec if isinstance(sec, list) else [sec]
        for entry in entries:
            if not isinstance(entry, dict):
                raise InputError(f"[{name}] must be a table", where)
            for key, value in entry.items():
                if key not in schema:
                    raise InputError(f"unknown key{did_you_mean(key, schema)}", f"{where}: [{name}] {key}")
                spec = schema[key]
                if not type_ok(value, spec.types):
                    want = " or ".join(t.__name__ for t in spec.types)
                    raise InputError(f"must be {want}, got {type(value).__name__} {value!r}", f"{where}: [{name}] {key}")
                if isinstance(value, float) and not math.isfinite(value):
                    raise InputError(f"must be finite, got {value}", f"{where}: [{name}] {key}")
                if isinstance(value, list) and any(isinstance(v, float) and not math.isfinite(v) for v in value):
                    raise InputError(f"must hold finite numbers, got {value!r}", f"{where}: [{name}] {key}")
                for check in (spec.check, EXTRA_CHECKS.get((name, key))):
                    msg = check(value) if check is not None else None
                    if msg:
                        raise InputError(f"{msg}, got {value!r}", f"{where}: [{name}] {key}")
            _cross_check(name, entry, where)
        if name == "maps":
            for i, entry in enumerate(entries):  # inline sky: [space], [observer], [sky] tables
                validate({k: entry[k] for k in ("space", "observer", "sky") if k in entry}, f"{where}: [[maps]] #{i + 1}")
    return data


def load_config(path: str | Path) -> Config:
    """Read a TOML config file and check it against the schema (sections, keys, types, ranges).
    What needs more than the schema (spaces, observers, the background) is checked where it is
    built: :func:`topology.scenario.check_config`, and the run plan for a run."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")  # -sig: a byte-order mark is not part of the TOML
    except FileNotFoundError:
        raise InputError("config file not found", str(p)) from None
    except (OSError, UnicodeDecodeError) as e:
        raise InputError(f"cannot read config ({e})", str(p)) from None
    try:
        data = toml_loads(text)
    except _toml.TOMLDecodeError as e:
        raise InputError(f"not valid TOML ({e})", str(p)) from None
    validate(data, str(p))
    return Config(data, p)


@contextmanager
def naming_file(cfg: Config | None):
    """Re-raise an InputError about a config key (where = "[section] key") with the config file
    in front, so the one-line error names both."""
    try:
        yield
    except InputError as e:
        if cfg is not None and cfg.path is not None and e.where and e.where.startswith("["):
            raise InputError(e.reason, f"{cfg.path}: {e.where}") from None
        raise


def rename_error(e: InputError, prefix: str, strip: str = "") -> InputError:
    """The same error with ``prefix`` in front of its key (``strip`` removed from the key first)."""
    key = e.where or ""
    if strip and key.startswith(strip):
        key = key[len(strip):]
    elif key.startswith("["):
        return InputError(e.reason, f"{prefix}: {key}")
    else:
        return e  # a file: it names itself
    return InputError(e.reason, f"{prefix} {key}")


def config_from_dict(data: dict, where: str = "config") -> Config:
    """A validated config from a dict (for notebooks and tests)."""
    validate(data, where)
    return Config(data, None)


def keys_table() -> str:
    """Every section and key with its default and documentation, for ``topology keys``."""
    lines = []
    for name, keys in SCHEMA.items():
        lines.append(f"[{name}]")
        for key, spec in keys.items():
            d = "(none)" if spec.default is None else repr(spec.default)
            lines.append(f"  {key:<18} default {d:<14} {spec.doc}")
        lines.append("")
    return "\n".join(lines)
