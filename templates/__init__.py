"""Jinja2 templates of the generated C headers (data only; read through hosttool.resources)."""
