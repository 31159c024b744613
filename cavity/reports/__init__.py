"""Reports: what is read back from result files and shown to people (no solving here).

- :mod:`~cavity.reports.tables` - receiver tables, attenuation fits, comparisons and result figures;
- :mod:`~cavity.reports.maps` - cartopy maps of the paths (imported only when drawing);
- :mod:`~cavity.reports.sweep` - diurnal figures and tables of sweep files;
- :mod:`~cavity.reports.sferic` - sferic waveform and spectrum figures.

Every file is written through :mod:`cavity.files` (atomic replace).
"""
