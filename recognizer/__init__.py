"""Inkcount's reading library: scans -> pages -> digit boxes -> cells -> digits -> values.

No Qt here: everything in this package runs headless and is used alike by the
command line (``inkcount``) and by the desktop window (``app``).
"""

__version__ = "0.1.0"
