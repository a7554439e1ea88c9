"""Bundled example specs (data only; read through hosttool.resources)."""
