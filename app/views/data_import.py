"""Data import: open a bundled demo or upload a file; preview, column types, missing counts."""

from __future__ import annotations

import hashlib

import pandas as pd
import streamlit as st

from app import bigdata, data, state, ui
from engine.errors import HazelError
from engine.io.tables import DEFAULT_MISSING_TOKENS, ImportOptions, read_table
from engine.prepare.columns import column_profile

UPLOAD_BYTES = "import_bytes"  # the last uploaded file, kept to re-read with other options
UPLOAD_NAME = "import_name"
UPLOAD_DIGEST = "import_digest"
SEPARATORS = {"Detect": None, "Comma ,": ",", "Semicolon ;": ";", "Tab": "\t", "Pipe |": "|"}
DECIMALS = {"Detect": None, "Point .": ".", "Comma ,": ","}
ENCODINGS = {"Detect": None, "UTF-8": "utf-8", "Windows (cp1252)": "cp1252", "Latin-1": "latin-1"}

st.title("Hazel", anchor=False)
st.markdown("##### Explore time-to-event data: curves, group comparisons and Cox models")
with st.container(border=True):
    st.markdown("**Before you start**")
    ui.show_cautions()

table = data.current_table(st.session_state)
if state.LOAD_ERROR in st.session_state:
    st.error(ui.escape(st.session_state[state.LOAD_ERROR]), icon=":material/error:")

if bigdata.in_use(st.session_state):
    label = st.session_state.get(state.DATASET_LABEL, "")
    st.success(f"In use: **{ui.escape(label)}**", icon=":material/check_circle:")
elif table is not None:
    label = st.session_state.get(state.DATASET_LABEL, table.source_name)
    if st.session_state.get(state.DATASET_IS_DEMO):
        st.info(
            f"You are looking at **{ui.escape(label)}**, invented data bundled with Hazel so that "
            "every page has something to show. Open another demo or upload your own file below.",
            icon=":material/science:",
        )
    else:
        st.success(f"In use: **{ui.escape(label)}**", icon=":material/check_circle:")

left, right = st.columns(2, gap="large")
with left:
    st.subheader("Upload your file", anchor=False)
    upload = st.file_uploader(
        "CSV, TSV, Excel (.xlsx), Parquet, SPSS (.sav, .zsav), Stata (.dta) or SAS "
        "(.sas7bdat, .xpt)",
        type=["csv", "tsv", "txt", "xlsx", "parquet", "sav", "zsav", "dta", "sas7bdat", "xpt"],
        key="import_file_upload",
        help="The file is read on this computer and never sent anywhere.",
    )
    pending = st.session_state.pop(state.PENDING_UPLOAD, None)
    if upload is not None:
        content = upload.getvalue()
        digest = hashlib.sha256(content).hexdigest()
        if st.session_state.get(UPLOAD_DIGEST) != digest:
            st.session_state[UPLOAD_DIGEST] = digest
            pending = (upload.name, content)
    if pending is not None:
        name, content = pending
        try:
            data.open_upload(st.session_state, content, name)
        except HazelError as error:
            st.session_state[state.LOAD_ERROR] = (
                f"{name} could not be read: {error} The data in use has not changed."
            )
        else:
            st.session_state[UPLOAD_BYTES] = content
            st.session_state[UPLOAD_NAME] = name
        st.rerun()

with right:
    st.subheader("Or open a demo dataset", anchor=False)
    demos = data.demo_files()
    if not demos:
        st.caption("No demo datasets are bundled with this copy.")
    for path in demos:
        if st.button(
            data.demo_label(path),
            key=f"import_demo_{path.stem}_button",
            icon=":material/dataset:",
            width="stretch",
        ):
            try:
                data.open_demo(st.session_state, path)
            except HazelError as error:
                st.session_state[state.LOAD_ERROR] = f"The demo could not be opened: {error}"
            st.session_state.pop(UPLOAD_BYTES, None)
            st.rerun()
        description = data.demo_description(path)
        if description:
            st.caption(ui.escape(description))

# --- big data: the data folder and databases (app.bigdata) ----------------------------------

st.divider()
folder_side, database_side = st.columns(2, gap="large")
with folder_side:
    st.subheader("Open from this computer's data folder", anchor=False)
    folder = bigdata.data_folder()
    if folder is None:
        st.caption(
            f"No data folder is set. Set the environment variable {bigdata.DATA_FOLDER_ENV}, or "
            f'`{bigdata.CONFIG_KEY} = "..."` under `[{bigdata.CONFIG_SECTION}]` in '
            ".streamlit/config.toml, and restart Hazel."
        )
    else:
        try:
            entries = bigdata.folder_entries(folder)
        except (HazelError, OSError) as error:
            st.error(ui.escape(error), icon=":material/error:")
            entries = []
        st.caption(
            f"Files and Parquet folders in {ui.escape(folder)}. A file whose analysis needs up "
            f"to {bigdata.memory_limit_text()} of memory (estimated from its rows and columns) "
            "is read into memory like an upload; bigger files and Parquet folders are read "
            "where they are (big data: curves, comparison and Cox model only)."
        )
        if entries:
            names = {
                e.name: f"{e.name}{'/' if e.is_folder else ''} · {e.size / 2**20:,.1f} MB"
                + (" · big data" if e.big else "")
                for e in entries
            }
            chosen = st.selectbox(
                "File or folder", list(names), format_func=names.get, key="import_folder_entry"
            )
            if st.button("Open", key="import_folder_open_button", icon=":material/folder_open:"):
                with st.spinner(f"Opening {chosen}…"):
                    try:
                        bigdata.open_from_folder(st.session_state, folder, chosen)
                    except HazelError as error:
                        st.session_state[state.LOAD_ERROR] = (
                            f"{chosen} could not be opened: {error} The data in use has not "
                            "changed."
                        )
                st.session_state.pop(UPLOAD_BYTES, None)
                st.rerun()
        else:
            st.caption("The folder holds no file Hazel can read.")
with database_side:
    st.subheader("Connect to a database", anchor=False)
    with st.form("dbconnect_form", clear_on_submit=True):
        url = st.text_input(
            "PostgreSQL address",
            key="dbconnect_url",
            placeholder="postgresql://USER@HOST:5432/DATABASE",
        )
        password = st.text_input(
            "Password (if the database asks for one)",
            type="password",
            key="dbconnect_password",
            help="Used to connect, then forgotten: never saved, shown or put in a recipe.",
        )
        relation = st.text_input("Table (schema.table)", key="dbconnect_table")
        query = st.text_area("…or a read-only query (SELECT …)", key="dbconnect_query", height=80)
        timeout = st.number_input(
            "Statement timeout (seconds; 0: no limit)",
            min_value=0,
            value=int(bigdata.STATEMENT_TIMEOUT),
            step=60,
            key="dbconnect_timeout",
            help="The database stops any read that runs longer. A read in progress can also "
            "be stopped with the Stop reading button or Streamlit's Stop.",
        )
        connect = st.form_submit_button("Connect", icon=":material/database:")
    if connect:
        with st.spinner("Connecting to the database…"):
            try:
                bigdata.connect_database(
                    st.session_state, url, password, relation, query, statement_timeout=timeout
                )
            except HazelError as error:
                st.session_state[state.LOAD_ERROR] = (
                    f"The database could not be opened: {error} The data in use has not changed."
                )
        del url, password  # nothing keeps them past the connection (the URL may hold one)
        for key in ("dbconnect_url", "dbconnect_password"):
            st.session_state.pop(key, None)
        st.rerun()
    st.caption("Read only: Hazel never writes to the database. The rows stay in it.")

if bigdata.in_use(st.session_state):
    source = st.session_state[state.SOURCE]
    st.subheader("Big data in use", anchor=False)
    st.markdown(
        f"**{ui.escape(source.name)}**, read by {ui.escape(source.backend)} "
        f"{ui.escape(source.version)}. The first rows, for a look at the columns:"
    )
    st.dataframe(source.sample().head(200), hide_index=True, height=280)
    st.page_link(
        "views/column_roles.py",
        label="Next: say which column is which",
        icon=":material/arrow_forward:",
    )
    st.stop()

table = data.current_table(st.session_state)
if table is None:
    st.stop()

# --- import options -------------------------------------------------------------------------

st.divider()
unsure = not table.confident
for note in table.notes:
    st.caption(f"ℹ︎ {ui.escape(note)}")
ui.remember("import_show_options", unsure)
show = st.toggle(
    "Show import options",
    key="import_show_options",
    help="Separator, decimal mark, encoding, sheet and missing-value markers.",
)
if unsure:
    st.warning(
        "Hazel was not sure how to read this file. Check the preview below, and change the "
        "import options if columns look wrong.",
        icon=":material/help:",
    )
if show:
    used = table.options
    with st.form("import_options_form"):
        cols = st.columns(4)
        sep = cols[0].selectbox("Separator", list(SEPARATORS), key="import_sep")
        decimal = cols[1].selectbox("Decimal mark", list(DECIMALS), key="import_decimal")
        encoding = cols[2].selectbox("Encoding", list(ENCODINGS), key="import_encoding")
        sheet = cols[3].text_input(
            "Excel sheet (name)", key="import_sheet", help="Empty = the first sheet."
        )
        ui.remember("import_missing", " ".join(t for t in DEFAULT_MISSING_TOKENS if t))
        missing = st.text_input(
            "Values that mean 'missing' (separated by spaces)",
            key="import_missing",
            help="Empty cells always count as missing.",
        )
        st.caption(
            f"Used for this file: separator {used.sep!r}, decimal mark {used.decimal!r}, "
            f"encoding {used.encoding!r}" + (f", sheet {used.sheet!r}" if used.sheet else "")
        )
        reread = st.form_submit_button("Read the file again with these options")
    if reread:
        options = ImportOptions(
            sep=SEPARATORS[sep],
            decimal=DECIMALS[decimal],
            encoding=ENCODINGS[encoding],
            sheet=sheet.strip() or None,
            missing_tokens=("", *missing.split()),
        )
        try:
            if st.session_state.get(UPLOAD_BYTES) is not None:
                data.open_upload(
                    st.session_state,
                    st.session_state[UPLOAD_BYTES],
                    st.session_state[UPLOAD_NAME],
                    options,
                )
            else:
                demo = next(p for p in data.demo_files() if p.name == table.source_name)
                fresh = read_table(demo, options)
                data.install_table(
                    st.session_state,
                    fresh,
                    st.session_state.get(state.DATASET_LABEL, demo.name),
                    is_demo=True,
                )
        except (HazelError, StopIteration) as error:
            st.error(f"The file could not be read with these options: {ui.escape(error)}")
        else:
            st.rerun()

# --- preview --------------------------------------------------------------------------------

st.subheader("Preview", anchor=False)
frame = table.frame
st.caption(f"{len(frame):,} rows × {frame.shape[1]} columns · showing the first 200 rows")
st.dataframe(frame.head(200), hide_index=True, height=280)


@st.cache_data(max_entries=4, show_spinner=False)
def column_overview(fingerprint: str, _frame: pd.DataFrame, labels: dict) -> pd.DataFrame:
    profile = column_profile(_frame)
    if labels:  # variable labels of an SPSS, Stata or SAS file, beside the names
        profile.insert(1, "label", [labels.get(c, "") for c in profile["column"]])
    return profile


st.subheader("Columns", anchor=False)
ui.table(column_overview(table.sha256, frame, table.column_labels), "columns", "import_columns")
st.page_link(
    "views/column_roles.py",
    label="Next: say which column is which",
    icon=":material/arrow_forward:",
)
