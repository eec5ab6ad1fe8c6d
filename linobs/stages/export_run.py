"""The ``export`` stage of ``run_study``: validated schedule tables and the estimator FMU.

Files in ``RUN_DIR/export`` (all written atomically, each with the caution):

``schedule_table.json``
    The table (:class:`~linobs.export.table.ScheduleTable`; ``linobs table-schema``).
``schedule_table.csv``, ``schedule_table_units.csv``
    One row per node (:mod:`linobs.export.csv_table`).
``<prefix>.h``, ``<prefix>.c``
    C99 tables and the allocation-free update (:mod:`linobs.export.c_code`).
``<study>_estimator.fmu``
    The scheduled estimator as an FMI 2.0 co-simulation FMU
    (:mod:`linobs.export.estimator_fmu`).

The per-node validation needs each node's own frozen-point check: the node's
stored local model with the schedule's gain at the node.
"""

from __future__ import annotations

import re
import time
from pathlib import Path
from typing import TYPE_CHECKING

from linobs.errors import UsageError

if TYPE_CHECKING:  # pragma: no cover
    from linobs.pipeline import StageSummary, _Runner

STAGE = "export"


def run_export_stage(runner: "_Runner", run_dir: Path, files: dict[str, str], *,
                     allow_failed: bool | None = None, caution: str) -> "StageSummary":
    from linobs.estimator.frozen import FrozenReport, frozen_point_check
    from linobs.export.assemble import build_table
    from linobs.export.table import fmu_identity, seal_table, write_table
    from linobs.linear.linear_model import LinearModel
    from linobs.stages import design
    from linobs.study import study_hash

    study, store = runner.study, runner.store
    t0 = time.perf_counter()
    if runner.on_stage is not None:
        runner.on_stage(STAGE, 1, 0)
    settings = study.config.export
    allow = settings.allow_failed if allow_failed is None else bool(allow_failed)
    schedule = design.build_schedule(study, store)
    frozen_file = run_dir / "validation" / "frozen.json"
    if not frozen_file.exists():
        raise UsageError(f"{frozen_file} is missing: run the validate stage before exporting")
    between = FrozenReport.model_validate_json(frozen_file.read_text())
    sweep = {r.item_id: r for r in store.results("sweep") if r.status == "ok"}
    models = {i: LinearModel.model_validate(sweep[i].data["linear"]) for i in sweep}
    node_points = [schedule.node_point(i) for i in range(len(schedule.data.nodes)) if i in models]
    index = {tuple(sorted(schedule.node_point(i).items())): i for i in models}
    own = frozen_point_check(schedule, node_points,
                             lambda p: models[index[tuple(sorted(p.items()))]],
                             study.config.validation)
    plant = (store.stage_info("validate-plant") or {}).get("counts", {})
    first = next(iter(models.values()))
    units = {v.name: (v.unit or "") for v in study.catalogue.by_name.values()}
    table = build_table(
        schedule, caution=caution, study=study.config.name, study_hash=study_hash(study),
        fmu=fmu_identity(study.fmu_path), units=units,
        design_settings=study.config.estimator.model_dump(mode="json"),
        validation_settings=study.config.validation.model_dump(mode="json"),
        parameters=first.parameters, linearize_method=study.config.linearize.method,
        own=own, between=between, nonlinear_rms=_rms(plant, "rms"),
        fixed_gain_rms=_rms(plant, "fixed_rms"), allow_failed=allow)
    folder = run_dir / "export"
    table = seal_table(table)
    path = write_table(table, folder / "schedule_table.json")
    files["schedule_table"] = str(path)
    if settings.csv:
        from linobs.export.csv_table import write_csv

        csv_path, units_path = write_csv(table, folder)
        files["schedule_csv"], files["schedule_csv_units"] = str(csv_path), str(units_path)
    exported = _exported_schedule(table) if settings.c_code or settings.estimator_fmu else None
    note = (f"source FMU {table.fmu.model_name} (GUID {table.fmu.guid}, SHA-256 "
            f"{table.fmu.sha256}); schedule table checksum {table.checksum}")
    if settings.c_code:
        from linobs.export.c_code import write_c_sources

        header, source = write_c_sources(exported, folder, prefix=settings.c_prefix,
                                         caution=table.caution, header_note=note)[:2]
        files["c_header"], files["c_source"] = str(header), str(source)
    if settings.estimator_fmu:
        from linobs.export.estimator_fmu import build_estimator_fmu

        name = re.sub(r"[^A-Za-z0-9_]", "_", study.config.name) + "_estimator"
        fmu = build_estimator_fmu(exported, folder / f"{name}.fmu", model_name=name,
                                  caution=table.caution, header_note=note)
        files["estimator_fmu"] = str(fmu)
    from linobs.run.types import ItemResult

    written = {k: v for k, v in files.items() if str(folder) in v}
    store.write_chunk(STAGE, f"{STAGE}-000000", [ItemResult(0, "ok", {"files": written})])
    usable = sum(n.usable for n in table.validation.nodes)
    failed = sum(n.designed and not n.passed for n in table.validation.nodes)
    return runner.finish(STAGE, 1, time.perf_counter() - t0, 1,
                         {"exported_usable": usable, "exported_failed": failed,
                          "exported_unusable": len(table.validation.nodes) - usable,
                          "allow_failed": table.allow_failed})


def _rms(info: dict, key: str) -> dict[str, float]:
    value = info.get(key)
    return {str(k): float(v) for k, v in value.items()} if isinstance(value, dict) else {}


def _exported_schedule(table):  # type: ignore[no-untyped-def]
    from linobs.estimator.schedule import GainSchedule

    if not any(n.usable for n in table.validation.nodes):
        raise UsageError("no node of the table is usable (every node failed validation or has no "
                         "design): there is no estimator to write as C code or as an FMU; set "
                         "[export] c_code = false and estimator_fmu = false to keep the tables only")
    return GainSchedule(table.schedule_data())
