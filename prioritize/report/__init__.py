"""Human-readable output: terminal tables, the one-star explanation, figures."""
