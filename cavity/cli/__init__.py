"""The ``cavity`` command line: one click group, each command in its own module of this package.

Commands are imported only when invoked (click's documented lazy-group pattern), so ``cavity --help``
stays fast and a command's heavy imports (numba, matplotlib, cartopy) cost nothing elsewhere.
The commands are thin: they parse options, call the public Python API and turn the library's typed
errors into one-line messages (exit 1).
"""

from __future__ import annotations

import importlib

import click

from cavity.version import __version__

#: command name -> (module in this package, short help shown by ``cavity --help``)
COMMANDS: dict[str, tuple[str, str]] = {
    "profile": ("profile", "Summarise and save an ionosphere altitude profile."),
    "inspect": ("inspect", "Show what a run of a scenario would do, without running it."),
    "run": ("run", "Solve a scenario and write its netCDF result file."),
    "bench": ("bench", "Measure solver speed on this machine and predict run times."),
    "verify": ("verify", "Check the solver against analytic and independent references."),
    "map": ("map", "Draw the transmitter, receivers and paths on a map, with day/night shading."),
    "table": ("table", "Tabulate the field at every receiver of result files (Markdown or CSV)."),
    "compare": ("compare", "Compare two result files: one figure, differences at receivers, attenuation."),
    "plot": ("plot", "Plot amplitude and phase against range from a result file (PNG or PDF)."),
    "demo": ("demo", "Run the bundled invented demo by day and night; write results, tables, figures, map."),
    "sweep": ("sweep", "Solve a scenario over UTC instants and frequencies on dask workers."),
    "coverage": (
        "coverage",
        "Map the field over an area: paths at many bearings on dask workers, a figure, a summary.",
    ),
    "sferic": ("sferic", "Lightning sferics: run a return-stroke scenario, plot waveforms and spectra."),
}


class LazyGroup(click.Group):
    """A click group whose subcommands are imported on first use."""

    def list_commands(self, ctx):
        return sorted(COMMANDS)

    def get_command(self, ctx, name):
        if name not in COMMANDS:
            return None
        module = importlib.import_module(f"cavity.cli.{COMMANDS[name][0]}")
        return module.command

    def format_commands(self, ctx, formatter):
        rows = [(name, COMMANDS[name][1]) for name in self.list_commands(ctx)]
        with formatter.section("Commands"):
            formatter.write_dl(rows)


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="cavity")
def main():
    """Predict VLF/ELF signal strength in the earth-ionosphere waveguide.

    A planning aid, not a guarantee of service: see the cautions in the README.

    Example: cavity inspect examples/quillon_head.toml
    """
