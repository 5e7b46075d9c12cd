"""Loop design and prediction: margins, networks, synthesis, E-series, tolerance spread."""
