"""The small inputs several stages read whole: the simulator's truth file and the user's factor file."""

from __future__ import annotations

import polars as pl

from liqpanel.core.settings import InputSettings
from liqpanel.ingest.layout import layout_of
from liqpanel.ingest.read import Spec, read_checked


def read_truth(inputs: InputSettings) -> pl.DataFrame:
    """The simulator's truth file (security, month, spread and other numbers) through the input contract."""
    return read_checked(
        layout_of(inputs.as_config(), "truth"), Spec("truth file", months=("month",), other_numeric=True),
        key=("security", "month"),
    )


def read_factors(inputs: InputSettings) -> pl.DataFrame | None:
    """The user's factor file (``inputs.factors``) with ``month`` as the first day of the month, or None."""
    if not inputs.path("factors"):
        return None
    return read_checked(
        layout_of(inputs.as_config(), "factors"), Spec("factor file", text=(), months=("month",), other_numeric=True),
        key=("month",),
    )
