"""Checks of the solver: :mod:`~cavity.checks.verify` (outside references, ``cavity verify``) and
:mod:`~cavity.checks.bench` (speed, ``cavity bench``)."""
