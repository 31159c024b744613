"""Frequency-domain references the time-domain engine is checked against.

Written apart from :mod:`cavity.fdtd` (nothing here imports it), from published closed forms and an
independent normal-mode solution:

- :mod:`cavity.reference.dipole` - source calibration (ITU-R P.368), near+far ground-level field of
  a short monopole on perfect ground, Leontovich surface impedance;
- :mod:`cavity.reference.plates` - exact field between perfectly conducting plates (Wait 1960 mode
  sum, and an independent image series);
- :mod:`cavity.reference.modes` - matrix normal-mode solution of a stratified isotropic guide with an
  impedance ground (ionosphere profiles, earth flattening);
- :mod:`cavity.reference.magnetised` - modes under the geomagnetic field: the 2 x 2 reflection matrix of
  the magnetised D region by full-wave integration, det(I - Rg R) = 0 followed from B0 = 0, the field
  as a sum of residues;
- :mod:`cavity.reference.groundwave` - Sommerfeld-Norton ground wave and the exact impedance-plane
  field (no ionosphere).

Conventions: exp(+j omega t), RMS phasors, moment p = I l of a monopole standing on the ground.
"""
