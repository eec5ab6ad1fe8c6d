"""The ``observability`` stage: a verdict at every swept point, refined boundaries, a nonlinear check.

1. **Verdicts.** Every point with a local model from the sweep is analyzed
   (:func:`linobs.observability.analysis.analyze`) in the coordinator — no
   FMU is needed — and its report is stored; points without a local model
   are stored with the sweep's status.
2. **Boundary refinement.** Where two neighboring grid points get different
   verdicts, the segment between them is bisected with new trims and
   linearizations until it is shorter than ``boundary_tolerance`` of the
   axis span; the boundary point is stored.  This touches the FMU, so it runs
   on the executor (crash isolation included).
3. **Nonlinear check.** At a sample of points (or all), the empirical
   observability Gramian from FMU simulations is compared with the linear
   verdict; disagreements are flagged.  Also on the executor.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterable, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from linobs.errors import EvaluationError, LinobsError
from linobs.linear.linear_model import LinearModel
from linobs.linear.linearize import linearize
from linobs.observability.report import ObservabilityReport, ObservabilitySettings
from linobs.operating.continuation import Continuation
from linobs.operating.trim import find_operating_point
from linobs.operating.trim_spec import TrimResult, TrimSpec
from linobs.run.types import Chunk, FMURef, ItemResult, WorkerContext, WorkItem

if TYPE_CHECKING:  # pragma: no cover
    from linobs.run.store import RunStore
    from linobs.study import Study

STAGE = "observability"
BOUNDARY = "observability-boundary"
EMPIRICAL = "observability-empirical"
WRITE_EVERY = 200  # verdicts per store transaction


def settings_of(study: "Study") -> ObservabilitySettings:
    """The study's observability settings with the measured outputs filled in."""
    s = study.config.observability
    if s.outputs is None:
        s = s.model_copy(update={"outputs": list(study.outputs)})
    return s


# ----------------------------------------------------------------------------- 1. verdicts
def analyze_stored(study: "Study", store: "RunStore", *,
                   progress: Callable[[int, int], None] | None = None) -> int:
    """Analyze every swept point not analyzed yet; returns how many were analyzed now."""
    from linobs.observability.analysis import analyze

    settings = settings_of(study)
    done = store.done_ids(STAGE)
    pending: list[ItemResult] = []
    computed = 0
    sweep_results = [r for r in store.results("sweep") if r.item_id not in done]
    total = len(sweep_results)
    for k, r in enumerate(sweep_results):
        t0 = time.perf_counter()
        if r.status == "ok":
            try:
                report = analyze(LinearModel.model_validate(r.data["linear"]), settings,
                                 outputs=settings.outputs)
                data = report_record(report)
                status, message = "ok", report.summary
            except LinobsError as exc:
                status, message, data = "failed", f"observability analysis failed: {exc}", {}
        else:
            status, data = r.status, {}
            message = f"no local model (sweep: {r.status.replace('_', ' ')})"
        pending.append(ItemResult(r.item_id, status, data, message, 0, time.perf_counter() - t0))
        if len(pending) >= WRITE_EVERY or k == total - 1:
            store.write_chunk(STAGE, f"{STAGE}-{pending[0].item_id:06d}", pending)
            computed += len(pending)
            pending = []
            if progress is not None:
                progress(computed, total)
    return computed


def report_record(report: ObservabilityReport) -> dict[str, Any]:
    """What is stored per point: the verdict, the margin and the whole report."""
    weakest = report.weakest if report.modes else None
    return {"verdict": report.verdict, "margin": report.margin,
            "weakest": None if weakest is None else weakest.label(),
            "report": report.model_dump(mode="json")}


# --------------------------------------------------------------------- 2. boundary refinement
def boundary_edges(study: "Study", verdicts: dict[int, str]) -> list[tuple[int, int]]:
    """Pairs of neighboring grid points (i < j) whose verdicts differ, both analyzed."""
    grid = study.grid
    edges = set()
    for i, v in verdicts.items():
        for j in grid.neighbors(i):
            w = verdicts.get(j)
            if w is not None and w != v:
                edges.add((min(i, j), max(i, j)))
    return sorted(edges)


def boundary_chunks(study: "Study", store: "RunStore", *, workers: int) -> tuple[list[Chunk], int]:
    """Chunks of edges to bisect (only those not done yet) and the number of edges."""
    settings = settings_of(study)
    if not settings.refine_boundary:
        return [], 0
    analyzed = {r.item_id: r for r in store.results(STAGE) if r.status == "ok"}
    verdicts = {i: r.data["verdict"] for i, r in analyzed.items()}
    sweep = {r.item_id: r for r in store.results("sweep") if r.status == "ok"}
    edges = boundary_edges(study, verdicts)
    done = store.done_ids(BOUNDARY)
    from linobs.stages.sweep import stage_settings

    shared = {**stage_settings(study), "observability": settings.model_dump(mode="json"),
              "tolerance": settings.boundary_tolerance,
              "spans": {n: hi - lo for n, (lo, hi) in study.grid.bounds().items()}}
    items = []
    for e, (i, j) in enumerate(edges):
        if e in done:
            continue
        items.append(WorkItem(e, {
            "a": study.point_values(i), "b": study.point_values(j), "ids": [i, j],
            "verdicts": [verdicts[i], verdicts[j]],
            "guess": {**sweep[i].data["trim"]["states"], **sweep[i].data["trim"]["inputs"]}}))
    size = max(1, min(16, -(-len(items) // max(1, 4 * workers))))
    chunks = [Chunk(f"{BOUNDARY}-{k:05d}", tuple(items[k:k + size]), shared)
              for k in range(0, len(items), size)]
    return chunks, len(edges)


def _point_on_segment(a: dict[str, float], b: dict[str, float], t: float) -> dict[str, float]:
    return {n: a[n] + t * (b[n] - a[n]) for n in a}


class _Evaluator:
    """Trim + linearize + analyze at points of one segment, warm-started along it."""

    def __init__(self, model: Any, settings: dict[str, Any], start: dict[str, float]) -> None:
        from linobs.observability.analysis import analyze

        self.model, self.s, self.start = model, settings, start
        self.spec = TrimSpec.model_validate(settings["trim"])
        self.obs = ObservabilitySettings.model_validate(settings["observability"])
        self.path = Continuation()
        self.analyze = analyze

    def verdict(self, values: dict[str, float], guess: dict[str, float] | None
                ) -> tuple[str, float, TrimResult]:
        fixed = {**self.start, **self.s["parameters"], **values}
        tr = find_operating_point(self.model, fixed, self.spec, method=self.s["method"],
                                  guess=guess, continuation=self.path)
        if not tr.converged:
            raise LinobsError(f"trim did not converge at {values}: {tr.message}")
        lm = linearize(self.model, tr.point(), method=self.s["method"], allow_outside_bounds=True)
        report = self.analyze(lm, self.obs, outputs=self.obs.outputs)
        return report.verdict, report.margin, tr


def refine_chunk(context: WorkerContext, chunk: Chunk) -> list[ItemResult]:
    """Task: bisect each edge of the chunk to place the verdict boundary."""
    s = chunk.settings
    fmu = FMURef(**s["fmu"])
    model = context.model(fmu)
    start = context.start_parameters(fmu)
    tol = float(s["tolerance"])
    spans = s["spans"]
    out = []
    for item in chunk.items:
        t0 = time.perf_counter()
        e0 = model.evaluations + model.directional_evaluations
        a, b = item.payload["a"], item.payload["b"]
        va, vb = item.payload["verdicts"]
        ev = _Evaluator(model, s, start)
        lo, hi = 0.0, 1.0
        guess = item.payload["guess"]
        # the segment's length relative to the spans of the axes it moves along
        moved = [n for n in a if a[n] != b[n]]
        rel = max(abs(b[n] - a[n]) / spans[n] for n in moved if spans.get(n)) if moved else 0.0
        steps = 0
        model.clear_log()
        try:
            while (hi - lo) * rel > tol and steps < 60:
                mid = 0.5 * (lo + hi)
                verdict, margin, tr = ev.verdict(_point_on_segment(a, b, mid), guess)
                guess = {**tr.states, **tr.inputs}
                steps += 1
                if verdict == va:
                    lo = mid
                else:  # the boundary of a's verdict; report what lies beyond it
                    hi, vb = mid, verdict
            t = 0.5 * (lo + hi)
            data = {"point": _point_on_segment(a, b, t), "ids": item.payload["ids"],
                    "between": [va, vb], "moved": moved, "interval": (hi - lo) * rel,
                    "bisections": steps}
            status, message = "ok", ""
        except (EvaluationError, LinobsError) as exc:
            status, message, data = "failed", f"boundary refinement failed: {exc}", {
                "ids": item.payload["ids"]}
        out.append(ItemResult(item.item_id, status, data, message,
                              model.evaluations + model.directional_evaluations - e0,
                              time.perf_counter() - t0))
    return out


# ------------------------------------------------------------------------ 3. nonlinear check
def empirical_selection(settings: ObservabilitySettings, analyzed: Sequence[ItemResult]) -> list[int]:
    """Which analyzed points get the nonlinear check: all, or an even spread plus the weakest."""
    ok = sorted(r.item_id for r in analyzed if r.status == "ok")
    if settings.empirical == "off" or not ok:
        return []
    if settings.empirical == "all" or len(ok) <= settings.empirical_points:
        return ok
    pick = set(np.unique(np.linspace(0, len(ok) - 1, settings.empirical_points - 1).round()
                         .astype(int)).tolist())
    chosen = {ok[k] for k in pick}
    margins = {r.item_id: r.data["margin"] for r in analyzed if r.status == "ok"}
    chosen.add(min(margins, key=lambda i: margins[i]))  # the weakest point is always checked
    return sorted(chosen)


def empirical_chunks(study: "Study", store: "RunStore", *, workers: int) -> tuple[list[Chunk], int]:
    settings = settings_of(study)
    analyzed = store.results(STAGE)
    chosen = empirical_selection(settings, analyzed)
    by_id = {r.item_id: r for r in analyzed}
    sweep = {r.item_id: r for r in store.results("sweep")}
    done = store.done_ids(EMPIRICAL)
    from linobs.stages.sweep import stage_settings

    shared = {**stage_settings(study), "observability": settings.model_dump(mode="json")}
    items = [WorkItem(i, {"point": TrimResult.model_validate(sweep[i].data["trim"]).point(),
                          "report": by_id[i].data["report"]})
             for i in chosen if i not in done]
    size = max(1, -(-len(items) // max(1, 2 * workers)))
    chunks = [Chunk(f"{EMPIRICAL}-{k:05d}", tuple(items[k:k + size]), shared)
              for k in range(0, len(items), size)]
    return chunks, len(chosen)


def empirical_horizon(report: ObservabilityReport) -> float:
    """The horizon of the nonlinear check: the linear Gramian's, or 5× the slowest stable mode."""
    if report.gramian.horizon:
        return float(report.gramian.horizon)
    stable = [-m.real for m in report.modes if m.real < 0]
    return 5.0 / min(stable) if stable else 1.0


def empirical_chunk(context: WorkerContext, chunk: Chunk) -> list[ItemResult]:
    """Task: the empirical observability Gramian at each point, compared with the linear verdict."""
    from linobs.observability.empirical import compare_with_linear, empirical_gramian

    s = chunk.settings
    fmu = FMURef(**s["fmu"])
    model = context.model(fmu)
    start = context.start_parameters(fmu)
    obs = ObservabilitySettings.model_validate(s["observability"])
    out = []
    for item in chunk.items:
        t0 = time.perf_counter()
        e0 = model.evaluations + model.directional_evaluations
        report = ObservabilityReport.model_validate(item.payload["report"])
        model.clear_log()
        try:
            model.set_parameters({**start, **s["parameters"]})
            emp = empirical_gramian(model, item.payload["point"], obs.outputs or report.outputs,
                                    horizon=empirical_horizon(report),
                                    perturbation=obs.empirical_perturbation,
                                    state_scales=obs.state_scales, output_scales=obs.output_scales)
            agreement = compare_with_linear(report, emp)
            data = {"agreement": agreement.model_dump(mode="json"),
                    "gramian": emp.model_dump(mode="json")}
            status, message = "ok", "" if agreement.agree else agreement.note
        except (EvaluationError, LinobsError) as exc:
            status, message, data = "failed", f"nonlinear check failed: {exc}", {}
        out.append(ItemResult(item.item_id, status, data, message,
                              model.evaluations + model.directional_evaluations - e0,
                              time.perf_counter() - t0))
    return out


def chunk_ids(chunks: Iterable[Chunk]) -> int:
    return sum(len(c.items) for c in chunks)
