"""Discrete controllers, sensors and motion references (compiled parts run in the kernels)."""
