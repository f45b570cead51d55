"""Test and analysis together: measured modes read from UFF or CSV, the model placed at the
test points, correlation (frequency errors, MAC, pairing, CoMAC), and test planning by
Effective Independence.

Modules: ``measured`` (the neutral measured set, placement, complex-to-real), ``csvfile``
and ``uff`` (file formats), ``locate`` (the model at the sensors), ``correlate``, ``efi``
(sensor placement), ``identify`` (modes from dataset-58 FRFs with sdypy-EMA).
"""

from .measured import MeasuredModes, Placement, TestDataError, real_modes

__all__ = ["MeasuredModes", "Placement", "TestDataError", "real_modes"]
