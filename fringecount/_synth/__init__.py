"""Implementation of :mod:`fringecount.synthetic` (public names live there)."""
