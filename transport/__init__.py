"""transport: transport coefficients from MD runs."""
__version__ = "0.1.0"
