"""Shared test set-up: headless plotting."""

import os

os.environ.setdefault("MPLBACKEND", "Agg")
