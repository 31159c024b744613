"""Turn cavity result files into a memo-style Markdown report: job, scenario, map, curves, receivers, cautions.

Usage::

    python examples/memo_report.py day.nc night.nc -o memo.md

One or more result files (from ``cavity run`` or ``cavity demo``). The memo and its figures are
written side by side: ``memo.md``, ``memo_map.png``, ``memo_<run>.png`` for each run and, with two
or more runs, ``memo_comparison.png`` (the first two runs). Existing files are replaced only with
``--overwrite``. Everything comes from the public functions of :mod:`cavity.reports` and the files
themselves (the scenario each file embeds), so the memo shows exactly what was run.
"""

from __future__ import annotations

import argparse
import sys
from datetime import datetime, timezone
from pathlib import Path


def build_memo(
    files: list[Path], output: Path, *, required_db: float | None = None, fit_km: tuple[float, float] | None = None
) -> list[Path]:
    """Write the memo and its figures; return every path written (the memo last)."""
    import cavity
    from cavity import reports as report
    from cavity.files import write_text
    from cavity.paths import build_paths
    from cavity.reports.maps import draw_map
    from cavity.results import open_result

    datasets = [open_result(f) for f in files]
    stems = [f.stem for f in files]  # figure file names
    if len(set(stems)) < len(stems):
        stems = [f"{i + 1}-{f.stem}" for i, f in enumerate(files)]
    labels = report.run_labels(datasets, fallback=stems)  # what a reader sees: day/night, UTC or title
    folder, stem = output.parent, output.stem
    written: list[Path] = []
    notes: list[str] = []
    start_km, stop_km = fit_km if fit_km else (None, None)

    # Map, from the scenario the first file embeds.
    map_path = folder / f"{stem}_map.png"
    try:
        scenario = cavity.load_scenario(str(datasets[0].attrs["scenario"]))
        if scenario.transmitter.latitude_deg is None:
            raise cavity.CavityError("its receivers are given by range only; there is nothing to place on a map")
        notes += draw_map(scenario, build_paths(scenario), map_path)
        written.append(map_path)
    except cavity.CavityError as exc:
        notes.append(f"no map: {exc}")
        map_path = None

    curves = []
    limits = report.common_amplitude_limits(datasets)  # every run on the same amplitude axis
    for ds, label, name in zip(datasets, labels, stems):
        path = report.plot_result(ds, folder / f"{stem}_{name}.png", amplitude_limits=limits)
        written.append(path)
        curves.append((label, path))
    comparison = None
    if len(datasets) >= 2:
        comparison = report.plot_comparison(
            datasets[0],
            datasets[1],
            folder / f"{stem}_comparison.png",
            labels[0],
            labels[1],
            start_km=start_km,
            stop_km=stop_km,
        )
        written.append(comparison)

    lines = [f"# {datasets[0].attrs.get('title', 'VLF/ELF prediction')}", ""]
    lines += ["## Job", ""]
    lines.append(
        f"Prepared {datetime.now(timezone.utc):%Y-%m-%d %H:%M} UTC with {datasets[0].attrs.get('source', 'cavity')} "
        "(axisymmetric time-domain earth-ionosphere waveguide solver)."
    )
    lines.append("")
    lines += [f"- `{f.name}` ({label}): {ds.attrs.get('title', '')}" for f, label, ds in zip(files, labels, datasets)]
    lines += ["", "## Scenario", ""]
    for ds, label in zip(datasets, labels):
        lines.append(f"**{label}**")
        lines.append("")
        lines += [f"- {line}" for line in report.scenario_summary(ds)]
        lines.append("")
    lines += [
        "<details><summary>Scenario file of the first run</summary>",
        "",
        "```toml",
        str(datasets[0].attrs.get("scenario", "")).rstrip(),
        "```",
        "",
        "</details>",
        "",
    ]
    lines += ["## Map", ""]
    lines.append(
        f"![Map of the transmitter, receivers and paths]({map_path.name})"
        if map_path
        else "No map (see the notes below)."
    )
    lines += ["", "## Field against range", ""]
    if comparison is not None:
        lines += [f"![{labels[0]} and {labels[1]}]({comparison.name})", ""]
    for label, path in curves:
        lines += [f"![{label}: amplitude and phase against range]({path.name})", ""]
    if len(datasets) >= 2:
        lines += ["## Differences at the receivers", ""]
        lines.append(
            report.comparison_report(datasets[0], datasets[1], labels[0], labels[1], start_km=start_km, stop_km=stop_km)
            .split("\nCautions:")[0]
            .rstrip()
        )
        lines.append("")
    else:
        fits = report.attenuation_rows(datasets, labels, start_km=start_km, stop_km=stop_km)
        lines += ["## Attenuation rate", "", report.format_table(fits, report.ATTENUATION_COLUMNS).rstrip(), ""]
    lines += ["## Receiver table", ""]
    table = report.receiver_table(
        datasets, "markdown", runs=labels if len(datasets) > 1 else None, required_db=required_db
    )
    body, _, _ = table.partition("\nCautions:")
    lines += [body.rstrip(), ""]
    if notes:
        lines += ["## Notes", ""] + [f"- {n}" for n in notes] + [""]
    lines += ["## Cautions", ""]
    cautions = dict.fromkeys(str(ds.attrs.get("cautions", "")).strip() for ds in datasets)
    lines += [c for c in cautions if c] + [""]
    written.append(write_text("\n".join(lines), output))
    return written


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="Turn cavity result files into a Markdown memo with figures.")
    parser.add_argument("results", nargs="+", type=Path, help="result files (netCDF) from cavity run or cavity demo")
    parser.add_argument("-o", "--output", type=Path, default=Path("memo.md"), help="memo to write (default memo.md)")
    parser.add_argument(
        "--required", type=float, default=None, metavar="DB", help="required field, dB re 1 uV/m: adds a margin column"
    )
    parser.add_argument(
        "--fit-range",
        type=float,
        nargs=2,
        default=None,
        metavar=("START_KM", "STOP_KM"),
        help="range window of the attenuation fit, km (default 1000-3000)",
    )
    parser.add_argument("--overwrite", action="store_true", help="replace existing memo and figure files")
    args = parser.parse_args(argv)

    from cavity.errors import CavityError

    out = args.output
    if out.suffix.lower() != ".md":
        parser.error(f"--output {out}: give a .md file name")
    if not (out.parent if str(out.parent) else Path(".")).is_dir():
        print(f"Error: output folder {out.parent} does not exist", file=sys.stderr)
        return 1
    if not args.overwrite:
        taken = [p for p in [out, *out.parent.glob(f"{out.stem}_*.png")] if p.exists()]
        if taken:
            print(f"Error: {taken[0]} exists already; pass --overwrite to replace it", file=sys.stderr)
            return 1
    try:
        written = build_memo(
            args.results, out, required_db=args.required, fit_km=tuple(args.fit_range) if args.fit_range else None
        )
    except CavityError as exc:
        print(f"Error: {str(exc).splitlines()[0]}", file=sys.stderr)
        return 1
    for path in written:
        print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
