"""Implementation of :mod:`fringecount.bridge` (private; import from ``fringecount.bridge``)."""
