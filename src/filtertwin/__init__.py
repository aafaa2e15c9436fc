"""filtertwin: Sallen-Key active filters, designed with real parts and heard through a digital twin."""

__version__ = "0.1.0"
