"""Shared fixtures: small hand-made demand tables and a CSV writer."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from sparsedemand.errors import InputError


@pytest.fixture
def long_frame() -> pd.DataFrame:
    """Two items over four months in long layout, with availability and attributes.

    ``A`` has a row every month (one out of stock); ``B`` starts in February and
    has no row for March (a true zero under the calendar rule).
    """
    return pd.DataFrame(
        {
            "item": ["A", "A", "A", "A", "B", "B"],
            "period": ["2024-01", "2024-02", "2024-03", "2024-04", "2024-02", "2024-04"],
            "quantity": [3.0, 0.0, 1.0, 0.0, 2.0, 5.0],
            "in_stock": [1, 0, 1, 1, 1, 1],
            "location": ["North", "North", "North", "North", "Hill", "Hill"],
            "unit_price": [2.5, 2.5, 2.5, 2.5, 10.0, 10.0],
        }
    )


@pytest.fixture
def wide_frame() -> pd.DataFrame:
    """Three items over three months in wide layout; ``C`` is listed from February."""
    return pd.DataFrame(
        {
            "item": ["A", "B", "C"],
            "2024-01": [1.0, 0.0, None],
            "2024-02": [0.0, 4.0, 2.0],
            "2024-03": [2.0, 0.0, 0.0],
        }
    )


@pytest.fixture
def write_csv(tmp_path):
    """Write text or a DataFrame to ``tmp_path/name`` and return the path."""

    def write(name: str, content) -> Path:
        path = tmp_path / name
        if isinstance(content, pd.DataFrame):
            content.to_csv(path, index=False)
        else:
            path.write_text(content, encoding="utf-8")
        return path

    return write


@pytest.fixture
def input_error():
    """Call ``func`` expecting an InputError whose message is one line containing every part."""

    def check(func, *parts: str) -> str:
        with pytest.raises(InputError) as info:
            func()
        message = str(info.value)
        assert "\n" not in message and "\r" not in message, message
        for part in parts:
            assert part in message, f"{part!r} not in {message!r}"
        return message

    return check
