"""The production line: per-unit fit and verdict, batch of a lot, the durable production
record, synthetic lots.
"""
