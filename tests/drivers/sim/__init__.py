"""Tests of the simulated bench (drivers/sim)."""
