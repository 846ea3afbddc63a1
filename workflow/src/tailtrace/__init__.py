"""tailtrace: end-of-day VaR and ES as a reproducible pipeline."""

__all__ = ["__version__"]

__version__ = "0.1.0"
