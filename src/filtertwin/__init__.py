"""filtertwin: Sallen-Key active filters designed with real parts, heard through a digital twin."""

__version__ = "0.1.0"
