"""Invariant Scout's study page. Start it with ``streamlit run app/scout.py``.

The page opens with a sample table and a short study already run. The sidebar chooses the
table and shares the study; the main column is the study, read top to bottom.
"""

from __future__ import annotations

import sys
from pathlib import Path

# `streamlit run app/scout.py` puts app/ on the path, not the repository: add it, so that
# `analysis` and `app` import the same way here as in the tests.
_ROOT = str(Path(__file__).resolve().parent.parent)
if _ROOT not in sys.path:
    sys.path.insert(0, _ROOT)

import streamlit as st  # noqa: E402

from app import page  # noqa: E402

st.set_page_config(page_title="Invariant Scout", page_icon=page.icon(),
                   layout="wide", initial_sidebar_state="expanded")
page.main()
