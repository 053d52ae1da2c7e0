"""Configuration files: the TOML of a fit and of an observation plan, checked key by key.
"""
