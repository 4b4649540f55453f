"""emsource: electromagnetic stress-energy sources in 3+1 form for numerical relativity."""

__version__ = "0.1.0"
