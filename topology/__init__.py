"""topology: matched-circle tests of the topology of space on HEALPix sky maps.

The flow of the work, one module or subpackage each: geometry and spaces (holonomy groups)
-> circles (predicted matched circles) -> skies (synthetic maps) -> search (matched-circle
statistics on maps) -> significance -> bounds -> report. Radians inside, degrees at the edges.
"""

__version__ = "0.1.0"
