"""Instrument capture over VISA with standard SCPI (profiles, sessions, simulator).

Sits beside ``data``: it produces FrequencyResponse and TimeTrace files and
knows nothing of fitting, loops or output.
"""
