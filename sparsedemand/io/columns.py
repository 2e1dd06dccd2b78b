"""What the loader is told (:class:`Columns`) and what it reports (:class:`LoadSummary`)."""

from __future__ import annotations

from dataclasses import dataclass, field

KNOWN_ATTRIBUTES = ("location", "category", "unit_price")
AVAILABILITY_GUESSES = ("in_stock", "on_hand")


@dataclass(frozen=True)
class Columns:
    """Names of the input columns.

    Parameters
    ----------
    item, period, quantity : str
        Required columns of the long layout (``item`` also names the label
        column of the wide layout).
    availability : str or None
        A 0/1 in-stock flag or an on-hand quantity; ``None`` looks for
        ``in_stock`` or ``on_hand`` and uses neither if absent.
    location, category, unit_price : str
        Optional per-item attributes, used when present.
    attributes : tuple of str
        Further per-item attribute columns to keep (for example a lead time).

    Examples
    --------
    >>> Columns(quantity="units").quantity
    'units'
    """

    item: str = "item"
    period: str = "period"
    quantity: str = "quantity"
    availability: str | None = None
    location: str = "location"
    category: str = "category"
    unit_price: str = "unit_price"
    attributes: tuple[str, ...] = ()


@dataclass
class LoadSummary:
    """What the loader did, for the user to check."""

    source: str
    layout: str
    items: int = 0
    periods: int = 0
    frequency: str = ""
    first_period: str = ""
    last_period: str = ""
    rows_read: int = 0
    rows_merged: int = 0
    zeros_filled: int = 0
    returns_clipped: int = 0
    partial_buckets_dropped: list[str] = field(default_factory=list)
    unavailable_share: float = 0.0
    availability_column: str | None = None

    def text(self) -> str:
        """Summary lines for stderr."""
        lines = [
            f"loaded {self.source} ({self.layout} layout): {self.items:,} items x "
            f"{self.periods:,} {self.frequency} periods, {self.first_period} to {self.last_period}",
            f"  rows read {self.rows_read:,}; duplicate rows merged {self.rows_merged:,}; "
            f"zeros filled {self.zeros_filled:,}",
        ]
        if self.availability_column:
            lines.append(
                f"  availability from '{self.availability_column}': "
                f"{self.unavailable_share:.1%} of item-periods out of stock"
            )
        else:
            lines.append("  no availability column: every period counted as in stock")
        if self.returns_clipped:
            lines.append(f"  returns netted; {self.returns_clipped:,} item-periods clipped at zero")
        if self.partial_buckets_dropped:
            lines.append("  partial periods dropped: " + ", ".join(self.partial_buckets_dropped))
        return "\n".join(lines)


def _attr_names(columns: Columns) -> list[str]:
    names = [columns.location, columns.category, columns.unit_price, *columns.attributes]
    return list(dict.fromkeys(names))
