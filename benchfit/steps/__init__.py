"""Step and load-step traces: model-free measurements and lmfit step fits."""
