"""Regenerate kernels/lsf_example.ecsv: the line-spread function of a fictional spectrograph.

The "Halcyon Echelle Spectrograph" (HES) is invented for the demo. Its profile is a Gaussian core of
FWHM c/60000 plus a 10 % Gaussian pedestal three times wider, a shape chosen only to exercise the tabulated
line-spread-function code path. Run: ``python demo/make_example_lsf.py``.
"""

from pathlib import Path

import numpy as np
from astropy.table import Table

C_KMS = 299792.458
R_CORE = 60000.0


def build():
    """Return the table (velocity km/s, response normalised to unit area)."""
    b_core = C_KMS / R_CORE / (2.0 * np.sqrt(np.log(2.0)))
    v = np.round(np.arange(-25.0, 25.0001, 0.25), 6)
    resp = 0.9 * np.exp(-((v / b_core) ** 2)) / b_core + 0.1 * np.exp(-((v / (3 * b_core)) ** 2)) / (3 * b_core)
    resp /= np.trapezoid(resp, v)
    t = Table([v, resp], names=("velocity", "response"))
    t["velocity"].unit = "km/s"
    t["response"].unit = "s/km"
    t.meta.update(
        {
            "description": "Line-spread function of the fictional Halcyon Echelle Spectrograph (demo data)",
            "source": "invented for the vsini demo: 0.9 Gaussian core FWHM c/60000 + 0.1 pedestal 3x wider",
            "regenerate": "python demo/make_example_lsf.py",
        }
    )
    return t


if __name__ == "__main__":
    out = Path(__file__).resolve().parents[1] / "kernels" / "lsf_example.ecsv"
    build().write(out, format="ascii.ecsv", overwrite=True)
    print(f"wrote {out.name}")
