"""Small helpers with no domain knowledge: atomic writes, bundled resources, tables, UTC time,
HTML pages, cautions.
"""
