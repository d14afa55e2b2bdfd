"""Readers behind :func:`fringecount.frames.open_frames`, one module per kind of container.

Import the public names from :mod:`fringecount.frames`; these modules are private.
"""
