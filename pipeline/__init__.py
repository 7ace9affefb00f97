"""screenweave: in-home media multitasking studies, from coded seconds to findings."""

__version__ = "0.1.0"
