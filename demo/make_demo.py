"""Regenerate the demo survey: the fictional Lantern cluster observed with the Halcyon Echelle Spectrograph.

Everything here is invented for the demo. The Lantern cluster is a young open cluster that does not
exist; its stars are called LAN-001 ... LAN-030; the Halcyon Echelle Spectrograph (HES, R = 60 000) is
an invented instrument whose tabulated line-spread function is ``kernels/lsf_example.ecsv`` (made by
``demo/make_example_lsf.py``). The spectra are synthetic, continuum normalised, 5160-5300 Angstrom,
0.04 Angstrom pixels, air wavelengths:

* solar-type dwarfs from v sin i = 1.8 km/s (below c/R = 5 km/s: expect upper limits) to 60 km/s, with
  radial-tangential macroturbulence, measured with the shipped ``fgk-optical`` lines;
* a macroturbulent giant (v sin i = 6 km/s, zeta_RT = 8 km/s);
* a solar-like differential rotator (alpha = 0.3, inclination 60 deg, v_eq = 52 km/s) integrated over
  the stellar disc with :mod:`vsini.surface` rather than with the standard kernel (no macroturbulence,
  and the star list says so with macroturbulence 0, so that a low q2/q1 can be read as differential
  rotation);
* hot fast rotators from 60 to 250 km/s measured with the ``a-optical`` Fe II lines (set per star in the
  star list, with macroturbulence off: negligible next to rotation);
* one low signal-to-noise star and one broken file (a truncated FITS file).

Run from the repository root: ``python demo/make_demo.py``. It rewrites ``demo/starlist.csv``,
``demo/truth.csv`` and ``demo/spectra/``. Seeds are fixed, so the files are the same on every run.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np

from vsini.grid import C_KMS, log_wavelength_grid, resample_flux_conserving
from vsini.io import write_spectrum
from vsini.kernels import doppler_width
from vsini.lines import load_line_set
from vsini.model import load_lsf
from vsini.simulate import simulate_spectrum
from vsini.spectrum import Spectrum
from vsini.surface import SurfaceModel, disk_line_profile

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
SPECTRA = HERE / "spectra"
WAVE_RANGE = (5160.0, 5300.0)
STEP = 0.04  # Angstrom: 2.2 pixels per resolution element at R = 60 000
RESOLUTION = 60000.0
SEED = 2031

#: (star, kind, teff, logg, vsini, zeta_RT, S/N, file type, star-list macroturbulence, period_days, radius_rsun)
#: kind: 'fgk' solar-type lines, 'hot' Fe II lines of A/B stars, 'diff' differential rotator, 'broken'.
STARS = [
    ("LAN-001", "fgk", 5750, 4.5, 1.8, 3.5, 180, "fits", "3.5", 22.0, 0.98),
    ("LAN-002", "fgk", 5500, 4.5, 2.6, 3.0, 150, "csv", "3.0", "", ""),
    ("LAN-003", "fgk", 5900, 4.4, 3.5, 3.8, 200, "fits", "3.8", 14.5, 1.05),
    ("LAN-004", "fgk", 6100, 4.3, 4.4, 4.2, 160, "fits", "4.2", "", ""),
    ("LAN-005", "fgk", 5200, 4.6, 5.5, 2.5, 140, "csv", "", 8.1, 0.85),
    ("LAN-006", "fgk", 6000, 4.4, 7.0, 4.0, 120, "fits", "", "", ""),
    ("LAN-007", "fgk", 6300, 4.3, 9.5, 4.8, 200, "fits", "", 5.6, 1.2),
    ("LAN-008", "fgk", 5400, 4.5, 12.0, 2.8, 90, "csv", "", "", ""),
    ("LAN-009", "fgk", 6200, 4.3, 15.0, 4.5, 150, "fits", "", 3.9, 1.15),
    ("LAN-010", "fgk", 6400, 4.3, 19.0, 5.0, 170, "fits", "", "", ""),
    ("LAN-011", "fgk", 6500, 4.2, 24.0, 5.5, 140, "csv", "", 2.6, 1.3),
    ("LAN-012", "fgk", 6600, 4.2, 30.0, 6.0, 180, "fits", "", "", ""),
    ("LAN-013", "fgk", 6700, 4.2, 38.0, 6.0, 160, "fits", "", "", ""),
    ("LAN-014", "fgk", 6800, 4.1, 48.0, 6.5, 150, "csv", "", 1.45, 1.45),
    ("LAN-015", "fgk", 6900, 4.1, 60.0, 7.0, 200, "fits", "", "", ""),
    ("LAN-016", "fgk", 5600, 4.5, 11.0, 3.2, 30, "fits", "", "", ""),
    ("LAN-017", "fgk", 4800, 2.5, 6.0, 8.0, 200, "fits", "", "", ""),
    ("LAN-018", "diff", 6500, 4.2, 45.0, 0.0, 300, "fits", "0", 2.1, 2.16),
    ("LAN-019", "hot", 7400, 4.1, 60.0, 0.0, 220, "fits", "off", "", ""),
    ("LAN-020", "hot", 7800, 4.1, 75.0, 0.0, 200, "csv", "off", "", ""),
    ("LAN-021", "hot", 8200, 4.1, 95.0, 0.0, 250, "fits", "off", "", ""),
    ("LAN-022", "hot", 8600, 4.0, 120.0, 0.0, 200, "fits", "off", "", ""),
    ("LAN-023", "hot", 9000, 4.0, 145.0, 0.0, 220, "csv", "off", "", ""),
    ("LAN-024", "hot", 9400, 4.0, 170.0, 0.0, 250, "fits", "off", "", ""),
    ("LAN-025", "hot", 9800, 4.0, 195.0, 0.0, 200, "fits", "off", "", ""),
    ("LAN-026", "hot", 10200, 4.0, 220.0, 0.0, 250, "csv", "off", "", ""),
    ("LAN-027", "hot", 10600, 4.0, 250.0, 0.0, 250, "fits", "off", "", ""),
    ("LAN-028", "fgk", 5800, 4.4, 2.0, 3.6, 160, "csv", "", "", ""),
    ("LAN-029", "fgk", 6000, 4.4, 26.0, 4.0, 130, "fits", "", "", ""),
    ("LAN-030", "broken", 6000, 4.4, 10.0, 4.0, 150, "fits", "", "", ""),
]
NOTES = {
    "LAN-017": "red giant; strong macroturbulence",
    "LAN-018": "solar-like differential rotation (alpha = 0.3, i = 60 deg) in the simulated spectrum",
    "LAN-016": "faint: low signal-to-noise ratio",
    "LAN-030": "file damaged in transfer (truncated)",
}


def _lines(kind, rng):
    """(centre, depth) of the lines in range, depths drawn once per star."""
    name = "a-optical" if kind == "hot" else "fgk-optical"
    lo, hi = WAVE_RANGE
    centres = [ln.wavelength for ln in load_line_set(name) if lo + 3 < ln.wavelength < hi - 3]
    depths = rng.uniform(0.3, 0.5, len(centres)) if kind == "hot" else rng.uniform(0.35, 0.7, len(centres))
    return list(zip(centres, depths.tolist(), strict=True))


def _differential(lines, teff, rv, snr, lsf, rng, name):
    """A spectrum of a differentially rotating star by direct disc integration (vsini.surface)."""
    model = SurfaceModel(v_eq_kms=52.0, inclination_deg=60.0, alpha=0.3, limb_darkening=("linear", 0.6))
    b = doppler_width(teff, element="Fe", microturbulence=1.0)
    dv = 0.25
    v = np.arange(-90.0, 90.0 + dv / 2, dv)
    fine = log_wavelength_grid(WAVE_RANGE[0] - 1.0, WAVE_RANGE[1] + 1.0, dv)
    depression = np.zeros(fine.size)
    for centre, depth in lines:
        profile = disk_line_profile(model, v, depth=depth, intrinsic_width_kms=b)
        u = C_KMS * np.log(fine / (centre * (1.0 + rv / C_KMS)))
        depression += np.interp(u, v, 1.0 - profile, left=0.0, right=0.0)
    k = np.arange(-lsf.half_extent, lsf.half_extent + dv / 2, dv)
    kernel = np.interp(k, lsf.velocity, lsf.response)
    kernel /= kernel.sum()
    flux_fine = 1.0 - np.convolve(depression, kernel, mode="same")
    wave = WAVE_RANGE[0] + STEP * np.arange(round((WAVE_RANGE[1] - WAVE_RANGE[0]) / STEP) + 1)
    flux, _, _ = resample_flux_conserving(fine, flux_fine, wave)
    err = np.sqrt(np.clip(flux, 1e-6, None)) / snr
    flux = flux + err * rng.standard_normal(flux.size)
    return Spectrum(wave, flux, err, name=name, meta={"model": "vsini.surface disc integration",
                                                      "vsini_kms": model.vsini_kms})


def _rounded(spec, name):
    """Round to what a text file needs (keeps the CSV files small); air wavelengths."""
    wave = np.round(spec.wavelength, 4)
    err = None if spec.flux_err is None else np.round(spec.flux_err, 5)
    return Spectrum(wave, np.round(spec.flux, 5), err, name=name, meta={"medium": "air"})


def make(folder=HERE):
    """Write the spectra, the star list and the truth table into ``folder``."""
    folder = Path(folder)
    spectra = folder / "spectra"
    spectra.mkdir(parents=True, exist_ok=True)
    for old in spectra.iterdir():
        old.unlink()
    lsf = load_lsf(ROOT / "kernels" / "lsf_example.ecsv")
    rows, truth = [], []
    for k, (star, kind, teff, logg, vsini, zeta, snr, ext, macro, period, radius) in enumerate(STARS):
        rng = np.random.default_rng([SEED, k])
        rv = float(np.round(rng.normal(12.0, 2.0), 2))  # the cluster's radial velocity, km/s
        lines = _lines(kind, rng)
        if kind == "diff":
            spec = _differential(lines, teff, rv, snr, lsf, rng, star)
        else:
            spec = simulate_spectrum(lines, wave_range=WAVE_RANGE, step=STEP, vsini=vsini, lsf=lsf,
                                     macroturbulence=zeta, teff=teff, microturbulence=1.0 if logg > 3.5 else 1.5,
                                     rv=rv, snr=snr, rng=rng, name=star)
        path = spectra / f"{star}.{ext}"
        write_spectrum(_rounded(spec, star), path, overwrite=True)
        if kind == "broken":  # keep the header, lose most of the data: a truncated transfer
            data = path.read_bytes()
            path.write_bytes(data[: 2880 + 4000])
        rows.append({
            "star": star,
            "spectrum": f"spectra/{star}.{ext}",
            "teff": teff,
            "logg": logg,
            "lines": "a-optical" if kind == "hot" else "",
            "macroturbulence": macro,
            "period_days": period,
            "radius_rsun": radius,
            "notes": NOTES.get(star, ""),
        })
        truth.append({"star": star, "vsini_true": vsini, "zeta_rt_true": zeta, "rv_true": rv, "snr": snr,
                      "kind": kind})
    _write_csv(folder / "starlist.csv", rows)
    _write_csv(folder / "truth.csv", truth)
    return folder


def _write_csv(path, rows):
    with open(path, "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(rows[0]), lineterminator="\n")
        writer.writeheader()
        for row in rows:
            writer.writerow({k: (f"{v:g}" if isinstance(v, float) and math.isfinite(v) else v) for k, v in row.items()})


if __name__ == "__main__":
    out = make()
    size = sum(p.stat().st_size for p in out.rglob("*") if p.is_file())
    print(f"wrote {len(STARS)} stars into {out.name}/ ({size / 1e6:.2f} MB)")
