"""Instrument layer: typed role classes over pyvisa, the SCPI helpers, dialects as data.

Never imports ``sequencer``.
"""
