"""Inkcount's reading library: scans -> pages -> digit boxes -> cells -> digits -> values.

No Qt here: everything in this package runs headless and is used alike by the
command line (``inkcount``) and by the desktop window (``app``).
"""

__version__ = "0.1.0"

#: Said wherever values leave the program (command output, export, the window).
CAUTION = (
    "Automatic reading makes mistakes: review every value marked to check before "
    "using the figures. Medical, legal and financial records follow their own "
    "verification rules and local regulations."
)
