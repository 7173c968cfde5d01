"""fleet: plan standard solar kit catalogues for electrification programs.

The package is a functional core organised by physical domain (``demand``,
``resource``, ``pv``, ``battery``, ``dispatch``, ``kits``, ``economics``,
``catalogue``) with I/O at the edges (``sites``, ``components``, ``config``,
``report``) and a thin command-line shell (``cli``).
"""

__version__ = "0.1.0"
