"""The resolved numbers: budget, filters, fixed-point formats, headroom and error proofs, the
float64 and bit-exact integer models.
"""
