"""``linobs demo``: the bundled lithium iron phosphate cell scenario (demo data).

For now the demo builds the bundled FMUs and shows, for the cell, how the
sensitivity of terminal voltage to state of charge collapses on the flat
open-circuit-voltage plateau: the reason state of charge is hard to estimate
from voltage in the middle of the range.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
from rich.console import Console
from rich.table import Table

from linobs.atomic import atomic_write_json
from linobs.model.bundled import BUNDLED_PLANTS, bundled_fmu, cache_dir
from linobs.model.loader import load_model
from linobs.report.console import CAUTION

DEMO_SOC = (0.02, 0.05, 0.10, 0.15, 0.20, 0.30, 0.40, 0.50, 0.60, 0.70, 0.80, 0.90, 0.95, 0.98)


def voltage_sensitivity(fmu: Path, soc_values: tuple[float, ...] = DEMO_SOC,
                        temperature: float = 25.0) -> list[dict[str, float]]:
    """∂v_term/∂soc at rest (i_cell = 0) over state of charge, from linearizations of the cell."""
    rows = []
    with load_model(fmu) as model:
        j_soc = model.state_names.index("soc")
        i_v = model.output_names.index("v_term")
        for soc in soc_values:
            lm = model.linearize({"soc": soc, "temp_cell": temperature, "t_amb": temperature,
                                  "i_cell": 0.0, "v_rc1": 0.0, "v_rc2": 0.0}, method="central")
            rows.append({"soc": soc, "v_term": float(lm.y0[i_v]),
                         "dv_dsoc": float(lm.C[i_v, j_soc]), "evaluations": lm.evaluations})
    return rows


def run_demo(console: Console, out: Path | None = None) -> Path:
    """Build the bundled FMUs, print the cell's voltage sensitivity, write it to ``out``."""
    console.print("[bold]linobs demo[/bold] — lithium iron phosphate cell (demo data, invented)")
    paths = {}
    for name in BUNDLED_PLANTS:
        paths[name] = bundled_fmu(name)
        console.print(f"  built {name}: {paths[name]}")
    rows = voltage_sensitivity(paths["lfp_cell"])
    table = Table(title="terminal voltage vs state of charge, at rest, 25 degC",
                  title_justify="left", show_edge=False)
    for col in ("soc", r"v_term \[V]", r"dv/dsoc \[mV/%]", ""):
        table.add_column(col, justify="right" if col else "left", no_wrap=True)
    peak = max(abs(r["dv_dsoc"]) for r in rows)
    for r in rows:
        mv_per_percent = r["dv_dsoc"] * 10.0  # V per unit soc -> mV per percent
        bar = "█" * max(1, int(round(20 * np.log10(1 + 9 * abs(r["dv_dsoc"]) / peak))))
        table.add_row(f"{r['soc']:.2f}", f"{r['v_term']:.4f}", f"{mv_per_percent:.3f}", bar)
    console.print(table)
    plateau = [abs(r["dv_dsoc"]) for r in rows if 0.3 <= r["soc"] <= 0.8]
    ends = [abs(r["dv_dsoc"]) for r in rows if r["soc"] <= 0.05 or r["soc"] >= 0.95]
    ratio = min(ends) / max(plateau)
    console.print(
        f"On the plateau (30-80 % SOC) a 1 % change of state of charge moves the terminal voltage by "
        f"at most {max(plateau) * 10:.2f} mV; near the ends by at least {min(ends) * 10:.1f} mV — "
        f"{ratio:.0f}x more. Voltage alone says little about state of charge in the middle of the "
        f"range; the estimator must lean on current integration there.")
    target = out or Path(os.environ.get("LINOBS_DEMO_OUT", cache_dir() / "demo"))
    target.mkdir(parents=True, exist_ok=True)
    result = target / "cell_voltage_sensitivity.json"
    payload = {"caution": CAUTION, "fmu": str(paths["lfp_cell"]), "rows": rows,
               "end_to_plateau_ratio": ratio}
    atomic_write_json(result, payload)
    console.print(f"  wrote {result}")
    console.print(f"[dim]{CAUTION}[/dim]")
    return result
