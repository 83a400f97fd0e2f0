"""The case: TOML schema and validation (schema), units, safe expressions, key reference, and the
physics a case describes before any mesh (model: energy scale, potential, walls, media).
"""
