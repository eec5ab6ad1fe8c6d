"""Sensor advice: which single added measurement helps most.

Each candidate is one extra output row: a declared output that is not in the
measured set (its row of C), or a state listed as measurable (a unit row).
For each single addition the point is graded again with the same
thresholds, sample time and Gramian kind; the Gramian with the added row is
W + W_c (the Gramian is linear in CᵀC), so only the candidate's own Gramian
is computed.  A candidate *restores* observability when the point is not
``observable`` without it and is with it.  Results are sorted best first:
those that restore, then by verdict, then by larger margin, then by larger
smallest Gramian eigenvalue.

References
----------
M. L. J. Hautus (1969), "Controllability and observability conditions of
linear autonomous systems", Indag. Math. 31:443-448 (PBH).
T. Kailath (1980), "Linear Systems", Prentice-Hall, section 2.3 (Gramians).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal, NamedTuple

import numpy as np

from linobs.observability.assessment import SampledFacts, StateFacts, assess
from linobs.observability.gramian import GramianKind, gramian_of
from linobs.observability.pbh import Normalization
from linobs.observability.report import VERDICTS, SensorAdvice, Verdict


class Candidate(NamedTuple):
    """One possible extra measurement, as a scaled output row."""

    name: str
    kind: Literal["output", "state"]
    row: np.ndarray


def sensor_advice(facts: StateFacts, C: np.ndarray, candidates: Sequence[Candidate],
                  verdict: Verdict, weak_threshold: float, gramian: np.ndarray,
                  gramian_kind: GramianKind, horizon: float | None,
                  sampled: SampledFacts | None = None,
                  normalization: Normalization = "sum") -> list[SensorAdvice]:
    """Grade every single addition of a candidate to the measured outputs.

    Parameters
    ----------
    facts : eigen-decomposition and thresholds of the scaled Ã
    C : (p, n) scaled measured output matrix
    candidates : the extra rows to try, one at a time
    verdict : the point's verdict with the measured outputs only
    weak_threshold : as for the point
    gramian, gramian_kind, horizon : the point's Gramian and how it was computed
    sampled : the sampled pair, when a sample time is set
    normalization : of the PBH margins, as for the point

    Returns
    -------
    list of SensorAdvice, best first
    """
    advice: list[SensorAdvice] = []
    for cand in candidates:
        row = np.asarray(cand.row, dtype=float).reshape(1, -1)
        result = assess(facts, np.vstack([C, row]), weak_threshold, sampled, normalization)
        W = gramian + gramian_of(facts.A, row, gramian_kind, horizon)
        with np.errstate(invalid="ignore"):
            low = float(np.linalg.eigvalsh(W)[0]) if np.all(np.isfinite(W)) else float("nan")
        advice.append(SensorAdvice(
            candidate=cand.name, kind=cand.kind, verdict=result.verdict, margin=result.margin,
            gramian_min=low,
            restores=verdict != "observable" and result.verdict == "observable"))
    advice.sort(key=lambda a: (not a.restores, VERDICTS.index(a.verdict), -a.margin,
                               -(a.gramian_min if np.isfinite(a.gramian_min) else -np.inf)))
    return advice
