"""Result flags: short lower-case words shared by the results, the tables, the command line and the docs.

Each estimator puts the words that apply into its result's ``flags`` tuple. :data:`FLAGS` is the one
place where a flag is defined, with a one-line meaning; add a new flag here before using it.
"""

from __future__ import annotations

from .errors import InputError

__all__ = ["FLAGS", "describe", "check_flags"]

#: Every flag and its meaning (one line each).
FLAGS: dict[str, str] = {
    # profile fit (vsini.fit)
    "unresolved": "rotation not resolved: v sin i is given as an upper limit, not as a value",
    "low_snr": "signal-to-noise ratio below 20 per pixel: the result is less reliable",
    "few_lines": "fewer than 3 lines were used",
    "lines_dropped": "some lines inside the spectrum were left out (in a gap, not detected, not significant, emission or blended)",
    "no_lines": "profile fit: no usable line (none in range, none detected, or all dropped with a reason): the fit gave no value",
    "fit_failed": "the minimiser did not converge or could not estimate uncertainties",
    "at_bound": "a fitted parameter ended at a limit of its allowed range (the top for v sin i and macroturbulence; either end for the radial velocity, the intrinsic width and a detected line's centre): its error is unreliable. Zero v sin i or macroturbulence is not flagged: it is reported as an upper limit",
    "macro_degenerate": "v sin i and macroturbulence are strongly correlated (|r| > 0.9): their split is unreliable",
    "poor_fit": "reduced chi-square above 3 with given uncertainties: the model does not describe the lines well",
    "undersampled": "fewer than 2 pixels per resolution element",
    "width_systematic": "profile fit: the assumed intrinsic line width (microturbulence +/- 0.5 km/s) moves v sin i by more than its statistical error: quote the systematic error (vsini_fit_sys) too; typical near or below c/R",
    # Fourier first-zero estimator (vsini.fourier)
    "fourier_noise": "Fourier: no zero stands clear of the noise: only an upper limit (or nothing, if no line) is given",
    "fourier_unresolved": "Fourier: no zero below the frequency where the instrument's transform sinks into the noise; upper limit below c/R",
    "fourier_no_q2": "Fourier: the second zero is not clear of the noise: no q2/q1",
    "fourier_marginal": "Fourier: the first zero is marginal (the lobe after it, as predicted from the main lobe, does not clear the noise): the value is selection-biased and its error widened; treat it with caution",
    "differential_candidate": "Fourier: q2/q1 more than 2 sigma below the rigid-rotation range of the limb-darkening law: solar-like differential rotation candidate",
    "antisolar_candidate": "Fourier: q2/q1 more than 2 sigma above the rigid-rotation range of the limb-darkening law: anti-solar differential rotation (poles faster) candidate; a cool polar spot or weaker limb darkening than assumed raise it too",
    "macro_shifts_zeros": "Fourier: radial-tangential macroturbulence comparable to v sin i moves the zeros (corrected with the joint kernel where possible); q2/q1 not used for differential rotation",
    "macro_unknown": "Fourier: q2/q1 is outside the rigid range but no macroturbulence was given: radial-tangential macroturbulence could lower it too (or raise it, when mostly radial)",
    # comparison and adoption (vsini.compare)
    "methods_disagree": "the profile fit and the Fourier first zero differ by more than 3 combined sigma: the adopted error is widened to cover both",
    "fourier_only": "the profile fit failed: the adopted value is the Fourier first-zero estimate",
    "fourier_failed": "the Fourier first-zero method could not be run (see the error column)",
    "not_measured": "neither method gave a value or a limit",
    "failed": "the star could not be processed at all (see the error column)",
}


def describe(flag):
    """The one-line meaning of ``flag``.

    Raises
    ------
    InputError
        For a word that is not in :data:`FLAGS`.
    """
    try:
        return FLAGS[flag]
    except KeyError:
        raise InputError(f"unknown flag {flag!r}; known flags: {', '.join(sorted(FLAGS))}") from None


def check_flags(flags):
    """Return ``flags`` as a sorted tuple of unique words after checking each is defined in :data:`FLAGS`."""
    out = tuple(sorted(set(flags)))
    for f in out:
        describe(f)
    return out
