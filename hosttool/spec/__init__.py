"""The validated bridge specification: TOML read into frozen dataclasses, every value checked
once.
"""
