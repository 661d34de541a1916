"""Invariant Scout in the browser: a study page read top to bottom, one panel per step kind.

Start it with ``streamlit run app/scout.py``. Everything computed here is a call into
``analysis/``; this package only reads widgets, keeps the session's study and results, and
draws results with the analysis figure builders.
"""
