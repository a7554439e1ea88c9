"""C headers rendered from a Design through jinja2 templates: context, C syntax, deterministic
writing.
"""
