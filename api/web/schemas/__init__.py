"""Request and response bodies of the REST API, separate from the store's tables.

Names follow ``XCreate`` (a new X), ``XUpdate`` (fields to change), ``XRead`` (what is answered),
one module per resource.
"""
