"""Proof of a Design: static and dynamic tests against the float64 reference, the verdict and
the HTML report.
"""
