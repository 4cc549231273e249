"""Deterministic demo data for the warehouse: an invented claims office's counter exports.

Use `seed.generate.generate(out_dir, scale=...)`; the planted parameters are `seed.generate.SCENARIO`.
"""
