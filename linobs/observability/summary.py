"""The one-line summary of an observability verdict, in plain words."""

from __future__ import annotations

import math

from linobs.observability.report import Direction, Mode, SamplingInfo, Verdict


def short_number(x: float) -> str:
    """Two significant digits, scientific outside [0.01, 1000): ``4.1e-4``, ``1e-3``, ``0.25``."""
    if x == 0 or not math.isfinite(x):
        return "0" if x == 0 else str(x)
    if 1e-2 <= abs(x) < 1e3:
        return f"{x:.2g}"
    mantissa, exponent = f"{x:.1e}".split("e")
    mantissa = mantissa.removesuffix(".0")
    return f"{mantissa}e{int(exponent)}"


def _states(mode: Mode, limit: int = 2) -> str:
    names = list(mode.participation)[:limit]
    return " and ".join(names) if names else "the state"


def _eigen(real: float, imag: float) -> str:
    text = f"{real:.3g}"
    return text + (f"{imag:+.3g}j" if imag else "")


def summary_line(verdict: Verdict, continuous_verdict: Verdict, modes: list[Mode],
                 basis: list[Direction], weak_threshold: float,
                 unobservable_modes: list[Mode], sampling: SamplingInfo | None) -> str:
    """One line naming the weakest mode (or the unobservable directions) and why.

    Parameters
    ----------
    verdict : the final verdict
    continuous_verdict : the verdict before the sampled-data check
    modes : every mode
    basis : the unobservable directions
    weak_threshold : the threshold the margins were compared with
    unobservable_modes : the modes marked unobservable
    sampling : the sampled-data check, if a sample time was set
    """
    if not modes:
        return "no states to observe"
    weakest = min(modes, key=lambda m: m.margin)
    thr = short_number(weak_threshold)
    if verdict != continuous_verdict and sampling is not None:
        ts = short_number(sampling.sample_time)
        if sampling.pathological_pairs:
            i, j, k = sampling.pathological_pairs[0]
            a, b = modes[i], modes[j]
            why = (f"modes λ = {_eigen(a.real, a.imag)} and λ = {_eigen(b.real, b.imag)} alias "
                   f"(imaginary parts differ by {k}·2π/Ts)")
        else:
            why = "the sampled modes are nearly indistinguishable"
        what = "observability lost" if sampling.lost else "observability weakened"
        return (f"{what} by sampling at Ts = {ts}: {why}; sampled margin "
                f"{short_number(sampling.margin)}")
    if verdict == "observable":
        return (f"observable: weakest mode {weakest.label()}, margin "
                f"{short_number(weakest.margin)} ≥ {thr}")
    if verdict == "weak":
        return (f"{_states(weakest)} weakly observable: mode {weakest.label()}, margin "
                f"{short_number(weakest.margin)} < {thr}")
    count = len(basis)
    first = basis[0].text() if basis else _states(weakest)
    more = f" and {count - 1} more" if count > 1 else ""
    dirs = f"{count} direction{'s' if count != 1 else ''} unseen ({first}{more})"
    if verdict == "unobservable-detectable":
        return f"unobservable but detectable: {dirs}, all of them decay (stable)"
    unstable = [m for m in unobservable_modes if not m.stable]
    culprit = unstable[0] if unstable else weakest
    return (f"unobservable and not detectable: {dirs}; mode λ = "
            f"{_eigen(culprit.real, culprit.imag)} is unseen and does not decay")
