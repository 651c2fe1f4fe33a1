"""flowgauge: frozen test sets and a deterministic scorer for learned AC optimal power flow proxies."""

__version__ = "0.1.0"

__all__ = ["__version__"]
