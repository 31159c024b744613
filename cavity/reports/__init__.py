"""Reports: what is read back from result files and shown to people (no solving here).

- :mod:`~cavity.reports.reading` - receivers, paths, frequencies and the embedded scenario of a result;
- :mod:`~cavity.reports.phase` - the one phase quantity shown (speed-of-light delay removed, wrapped);
- :mod:`~cavity.reports.tables` - receiver tables (Markdown, CSV), their header lines and notes;
- :mod:`~cavity.reports.attenuation` - attenuation rates (loss per 1000 km, spreading removed);
- :mod:`~cavity.reports.compare` - two results compared: differences at receivers, modal nulls;
- :mod:`~cavity.reports.plots` - amplitude and phase figures, comparison figures;
- :mod:`~cavity.reports.memo` - plain-language lines about a run, for a memo;
- :mod:`~cavity.reports.maps` - cartopy maps of the paths (imported only when drawing);
- :mod:`~cavity.reports.sweep` - diurnal figures and tables of sweep files;
- :mod:`~cavity.reports.sferic` - sferic waveform and spectrum figures;
- :mod:`~cavity.reports.coverage` - coverage figure and summary.

The functions a notebook uses on result files are importable from the package itself
(``from cavity import reports; reports.receiver_table(...)``). Every file is written through
:mod:`cavity.files` (atomic replace).
"""

from cavity.reports.attenuation import (
    ATTENUATION_COLUMNS,
    AttenuationFit,
    attenuation_rate,
    attenuation_rows,
    fit_caveat,
    result_attenuation,
    spreading_db,
)
from cavity.reports.compare import (
    common_frequencies,
    comparison_columns,
    comparison_report,
    comparison_rows,
    comparison_title,
    modal_nulls_km,
)
from cavity.reports.memo import scenario_summary
from cavity.reports.phase import PHASE_DEFINITION, PHASE_QUANTITY, display_phase_deg, relative_phase_deg, wrap_phase_deg
from cavity.reports.plots import (
    common_amplitude_limits,
    comparison_figure,
    ground_classes_along,
    near_field_km,
    plot_comparison,
    plot_result,
    result_figure,
)
from cavity.reports.reading import earth_curvature, frequency_text, is_sweep, scenario_document
from cavity.reports.tables import (
    Column,
    format_table,
    noise_in_bandwidth_db,
    receiver_columns,
    receiver_daylight,
    receiver_rows,
    receiver_table,
    run_header,
    run_label,
    run_labels,
    table_notes,
)

__all__ = [
    "ATTENUATION_COLUMNS",
    "PHASE_DEFINITION",
    "PHASE_QUANTITY",
    "AttenuationFit",
    "Column",
    "attenuation_rate",
    "attenuation_rows",
    "common_amplitude_limits",
    "common_frequencies",
    "comparison_columns",
    "comparison_figure",
    "comparison_report",
    "comparison_rows",
    "comparison_title",
    "display_phase_deg",
    "earth_curvature",
    "fit_caveat",
    "format_table",
    "frequency_text",
    "ground_classes_along",
    "is_sweep",
    "modal_nulls_km",
    "near_field_km",
    "noise_in_bandwidth_db",
    "plot_comparison",
    "plot_result",
    "receiver_columns",
    "receiver_daylight",
    "receiver_rows",
    "receiver_table",
    "relative_phase_deg",
    "result_attenuation",
    "result_figure",
    "run_header",
    "run_label",
    "run_labels",
    "scenario_document",
    "scenario_summary",
    "spreading_db",
    "table_notes",
    "wrap_phase_deg",
]
