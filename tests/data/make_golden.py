"""Regenerate (or check) the golden result files and table texts of the report tests.

The golden files ``tests/data/golden_{day,night,dawn}.nc`` are small, coarse solver runs of the
invented scenarios embedded in them (attribute ``scenario``); the report tests read them as fixed
inputs for table, figure and comparison formatting. This script is the one way they are made:

    PYTHONPATH=. python tests/data/make_golden.py            # re-solve and rewrite them
    PYTHONPATH=. python tests/data/make_golden.py --check    # re-solve and compare, write nothing

``--check`` exits 1 when a re-solve differs from the stored file (beyond float32 storage rounding),
so a solver change that moves the numbers is seen, and the files are regenerated on purpose. A few
minutes on 2 cores. The physics the files show is checked in tests/test_report.py
(``test_golden_files_show_the_physics``).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

DATA = Path(__file__).resolve().parent
NAMES = ("day", "night", "dawn")
#: The tables the report tests compare with text (name, format, receiver_table keyword arguments).
TABLES = (
    ("day", "markdown", {"required_db": 30.0, "noise_db": -10.0, "bandwidth_hz": 100.0}),
    ("day", "csv", {"required_db": 30.0, "noise_db": -10.0, "bandwidth_hz": 100.0}),
    ("dawn", "markdown", {}),
    ("night", "csv", {}),
)
COMPARED = ("ez_amplitude", "ez_phase", "b_amplitude", "b_phase", "receiver_ez_amplitude", "receiver_ez_phase")


def main(argv: list[str] | None = None) -> int:
    import cavity
    from cavity.reports.tables import receiver_table
    from cavity.results import write_result

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true", help="re-solve and compare; write nothing")
    args = parser.parse_args(argv)
    bad = 0
    for name in NAMES:
        path = DATA / f"golden_{name}.nc"
        stored = cavity.open_result(path)
        text = str(stored.attrs["scenario"])
        ds = cavity.simulate(cavity.load_scenario(text))
        if args.check:
            for var in COMPARED:
                a = np.asarray(stored[var].values, float)
                b = np.asarray(ds[var].values, float)
                if var.endswith("phase"):  # degrees: compare on the circle
                    diff = np.abs((a - b + 180.0) % 360.0 - 180.0)
                else:
                    diff = np.abs(a - b)
                worst = float(np.nanmax(diff)) if np.isfinite(diff).any() else 0.0
                same_nan = np.array_equal(np.isnan(a), np.isnan(b))
                ok = same_nan and worst <= 1e-3  # float32 storage of dB and degrees
                bad += not ok
                print(f"golden_{name} {var}: worst difference {worst:.2e} {'ok' if ok else 'DIFFERS'}")
        else:
            write_result(ds.assign_attrs(scenario=text), path, overwrite=True)
            print(f"wrote {path}")
    if not args.check:
        from cavity.files import write_text

        for name, fmt, kwargs in TABLES:
            suffix = "md" if fmt == "markdown" else "csv"
            ds = cavity.open_result(DATA / f"golden_{name}.nc")
            write_text(receiver_table(ds, fmt, **kwargs), DATA / f"golden_{name}_table.{suffix}")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
