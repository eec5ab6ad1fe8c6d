"""Load the bundled LFP cell FMU (demo data) and linearize it at one operating point.

    python examples/linearize_point.py
"""

from __future__ import annotations

import numpy as np

import linobs


def main() -> None:
    fmu = linobs.bundled_fmu("lfp_cell")  # built into the cache folder on first use
    with linobs.load_model(fmu) as model:
        print(model)
        print("states:", model.catalogue.names("states"))
        # half charged, 25 degC, discharging at 10 A (a 0.5C rate for this 20 Ah demo cell)
        lm = model.linearize({"soc": 0.5, "temp_cell": 25.0, "t_amb": 25.0, "i_cell": 10.0})
        np.set_printoptions(precision=4, suppress=False)
        print(f"method {lm.method}, {lm.evaluations} FMU evaluations, {lm.column_groups} column groups")
        print("A =\n", lm.A)
        print("C =\n", lm.C)
        print("d v_term / d soc =", lm.C[lm.outputs.index("v_term"), lm.states.index("soc")], "V per unit SOC")
        for warning in lm.warnings:
            print("warning:", warning)


if __name__ == "__main__":
    main()
