"""The release of seqtest (written into every document it produces)."""

__version__ = "0.2.0"
