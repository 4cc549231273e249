"""counter-warehouse: load performance-counter CSV exports, then size, troubleshoot and trend."""
import os as _os

from warehouse._cpu import prefer_avx2_sorting as _prefer_avx2_sorting

_prefer_avx2_sorting(_os.environ)   # before NumPy loads: see warehouse/_cpu.py
