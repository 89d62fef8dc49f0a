"""Splitting a table by product once, for the stages that loop over products.

`frame[frame["product"] == product]` inside a loop over products reads the whole table once per product:
with thousands of product lines and millions of rows that is billions of comparisons. `rows_by_product`
groups once; each product's rows come in the table's order with its index, as the boolean mask gives them.
"""

from __future__ import annotations

from typing import Mapping

import pandas as pd


class RowsByProduct(Mapping[object, pd.DataFrame]):
    """A table's rows per product (a product absent from the table gets the table's empty frame)."""

    def __init__(self, frame: pd.DataFrame) -> None:
        self._empty = frame.iloc[0:0]
        self._groups = {product: rows for product, rows in frame.groupby("product", sort=False)} if len(frame) else {}

    def __getitem__(self, product: object) -> pd.DataFrame:
        return self._groups.get(product, self._empty)

    def __iter__(self):  # type: ignore[no-untyped-def]
        return iter(self._groups)

    def __len__(self) -> int:
        return len(self._groups)


def rows_by_product(frame: pd.DataFrame) -> RowsByProduct:
    """`frame`'s rows per product, grouped once (see the module's docstring)."""
    return RowsByProduct(frame)
