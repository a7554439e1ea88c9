"""hosttool: integer constants, C headers, proofs and calibration blocks for bridge sensors."""

__version__ = "0.2.0"
