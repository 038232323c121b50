"""``python -m app``: the command line. It must not import streamlit."""

import sys

from app.cli import main

if __name__ == "__main__":
    sys.exit(main())
