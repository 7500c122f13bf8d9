"""The floor for ``bench/page_sessions_bench.py``: the least a Streamlit page that takes an upload and
shows it as tables costs, measured beside Fissure's page in the same run, browser and sessions.

It draws a title, the uploader, a count and two tables (the first rows, and a summary), with no
settings, audit, findings or charts. Whatever four sessions of this page cost beyond one session
alone is Streamlit's and the browsers' share on the machine, not Fissure's.

    streamlit run bench/floor_page.py
"""
import pandas as pd
import streamlit as st

st.set_page_config(page_title="Floor page", layout="wide")
st.title("Floor page: an upload shown as two tables")
upload = st.file_uploader("A CSV table", type=["csv"], key="upload")
if upload is None:
    table = pd.DataFrame({"a": range(20), "b": [x * 0.5 for x in range(20)]})
    st.caption("Nothing uploaded yet: a small table of its own.")
else:
    table = pd.read_csv(upload)
    st.caption(f"Using the uploaded file {upload.name}")
st.metric("Rows", f"{len(table):,}")
st.dataframe(table.head(50), hide_index=True)
st.dataframe(table.describe(), width="stretch")
