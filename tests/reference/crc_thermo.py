"""Writes crc_thermo.json: standard formation properties (298.15 K, 1 bar, gas) of a few
substances, read from the CRC Handbook (95th ed., 2014) table "Standard Thermodynamic Properties of Chemical
Substances" as bundled in the PyPI package `chemicals` (version pinned below).

Run (needs PyPI):
    python3 -m venv /tmp/refenv && /tmp/refenv/bin/pip install chemicals==1.5.2
    /tmp/refenv/bin/python tests/reference/crc_thermo.py > tests/reference/crc_thermo.json

The JSON is committed; the tests read it and never run this script.
"""

import json

import chemicals
from chemicals import heat_capacity

SUBSTANCES = {
    "CO": "630-08-0",
    "H2O": "7732-18-5",
    "CO2": "124-38-9",
    "H2": "1333-74-0",
    "NO2": "10102-44-0",
    "N2O4": "10544-72-6",
    "N2": "7727-37-9",
    "NH3": "7664-41-7",
    "SO2": "7446-09-5",
    "SO3": "7446-11-9",
    "O2": "7782-44-7",
}


def value(row, column, element):
    x = row[column]
    if x != x:  # NaN: the table leaves Gf blank for elements in their reference state
        return 0.0 if element and column in ("Hfg", "Gfg") else None
    return float(x)


def main():
    table = heat_capacity.CRC_standard_data
    out = {
        "source": "CRC Handbook of Chemistry and Physics, 95th edition (Haynes, Bruno & Lide, CRC Press 2014), 'Standard Thermodynamic Properties of "
        "Chemical Substances' (gas phase, 298.15 K, 1 bar), as bundled in the PyPI package "
        f"chemicals {chemicals.__version__}",
        "units": {"dHf": "kJ/mol", "dGf": "kJ/mol", "S0": "J/(mol K)"},
        "substances": {},
    }
    for name, cas in SUBSTANCES.items():
        row = table.loc[cas]
        element = name in ("H2", "N2", "O2")
        out["substances"][name] = {
            "cas": cas,
            "dHf": value(row, "Hfg", element) / 1000.0,
            "dGf": value(row, "Gfg", element) / 1000.0,
            "S0": value(row, "S0g", element),
        }
    print(json.dumps(out, indent=2))


if __name__ == "__main__":
    main()
