"""siting: choose building facades for passive reflecting surfaces.

The pipeline (see README.md, "Architecture"): job file -> district -> candidate spots and demand ->
line-of-sight visibility -> link gains -> integer program -> GIS layers, survey list and report.
"""

__version__ = "0.1.0"
