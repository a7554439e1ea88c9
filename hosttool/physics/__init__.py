"""Physics with no design choices: the exact bridge equations, the ADC (codes, noise, sinc^k),
legal-metrology tables.
"""
