"""Writes janaf_gas.json: standard equilibrium constants of four gas-phase reactions at several
temperatures, from the NIST-JANAF Thermochemical Tables, 4th edition (M. W. Chase, J. Phys.
Chem. Ref. Data, Monograph 9, 1998), as bundled in the PyPI package `chemicals` (pinned below):
the 298.15 K enthalpies of formation and entropies, and the tabulated heat capacities.

For each reaction: dH and dS at 298.15 K, and K°(T) = exp(-dG°(T)/RT) with
dH(T) = dH(298.15) + integral of dCp dT and dS(T) = dS(298.15) + integral of dCp/T dT
(trapezoid rule on the table's own grid, which has 298.15 K and 100 K steps above 300 K).
R is the CODATA 2018 value.

Run (needs PyPI):
    python3 -m venv /tmp/refenv && /tmp/refenv/bin/pip install chemicals==1.5.2
    /tmp/refenv/bin/python tests/reference/janaf_gas.py > tests/reference/janaf_gas.json

The JSON is committed; the tests read it and never run this script.
"""

import csv
import json
import math
import os

import chemicals

R = 6.02214076e23 * 1.380649e-23  # CODATA 2018, exact

# The bundle has no rows for elements in their reference state, so the reactions avoid them.
CAS = {
    "N2O4": "10544-72-6",
    "NO2": "10102-44-0",
    "NO": "10102-43-9",
    "N2O3": "10544-73-7",
    "SO2": "7446-09-5",
    "SO3": "7446-11-9",
}

REACTIONS = {
    "N2O4 <=> 2 NO2": {"N2O4": -1, "NO2": 2},
    "NO + NO2 <=> N2O3": {"NO": -1, "NO2": -1, "N2O3": 1},
    "SO2 + NO2 <=> SO3 + NO": {"SO2": -1, "NO2": -1, "SO3": 1, "NO": 1},
}

TEMPERATURES = [298.15, 400.0, 500.0, 700.0]


def main():
    folder = os.path.dirname(chemicals.__file__)
    rows = {}
    with open(os.path.join(folder, "Reactions", "JANAF_1998.tsv")) as f:
        for row in csv.DictReader(f, delimiter="\t"):
            rows[row["CAS"]] = row
    with open(os.path.join(folder, "Heat Capacity", "JANAF_1998_gas_Cp.json")) as f:
        cp_tables = json.load(f)

    def formation(name):
        row = rows[CAS[name]]
        hf = float(row["Hfg"]) if row["Hfg"] else 0.0
        return hf, float(row["S0g"])

    def cp_on(name, grid):
        ts, cps = cp_tables[CAS[name]][0], cp_tables[CAS[name]][1]
        out = []
        for t in grid:
            for k in range(len(ts) - 1):
                if ts[k] <= t <= ts[k + 1]:
                    w = (t - ts[k]) / (ts[k + 1] - ts[k])
                    out.append(cps[k] + w * (cps[k + 1] - cps[k]))
                    break
        return out

    out = {
        "source": "NIST-JANAF Thermochemical Tables, 4th edition (Chase 1998), gas phase, via the "
        f"PyPI package chemicals {chemicals.__version__}; K(T) by integrating the tabulated Cp",
        "standard_pressure_bar": 1.0,
        "reactions": {},
    }
    for equation, nu in REACTIONS.items():
        dh0 = sum(v * formation(s)[0] for s, v in nu.items())
        ds0 = sum(v * formation(s)[1] for s, v in nu.items())
        dcp298 = sum(v * cp_on(s, [298.15])[0] for s, v in nu.items())
        entry = {"dH_kJ_per_mol": dh0 / 1000.0, "dS_J_per_mol_K": ds0, "dCp_298_J_per_mol_K": dcp298, "K": {}}
        for t in TEMPERATURES:
            grid = [298.15] + [x for x in range(300, int(t) + 1, 100)]
            if grid[-1] != t:
                grid.append(t)
            grid = sorted(set(grid))
            dcp = [0.0] * len(grid)
            for s, v in nu.items():
                for k, c in enumerate(cp_on(s, grid)):
                    dcp[k] += v * c
            dh, ds = dh0, ds0
            for k in range(len(grid) - 1):
                a, b = grid[k], grid[k + 1]
                dh += 0.5 * (dcp[k] + dcp[k + 1]) * (b - a)
                ds += 0.5 * (dcp[k] / a + dcp[k + 1] / b) * (b - a)
            entry["K"][f"{t:g}"] = math.exp(-(dh - t * ds) / (R * t))
        out["reactions"][equation] = entry
    print(json.dumps(out, indent=2))


if __name__ == "__main__":
    main()
