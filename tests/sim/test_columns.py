"""sim.analysis.columns.label_codes: the same codes for a column whether it is categorical or text."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from sim.analysis.columns import label_codes

_names = st.text(alphabet="abcxyz ", min_size=1, max_size=4)


@settings(max_examples=200, deadline=None)
@given(labels=st.lists(_names, min_size=1, max_size=5, unique=True),
       values=st.lists(st.one_of(_names, st.none()), max_size=30))
def test_categorical_and_text_columns_give_the_same_codes(labels, values):
    text = pd.Series(values, dtype=object)
    cat = text.astype("category")
    expected = np.array([labels.index(v) if v in labels else -1 for v in values], dtype=np.intp)
    np.testing.assert_array_equal(label_codes(text, labels), expected)
    np.testing.assert_array_equal(label_codes(cat, labels), expected)
    # categories the column never uses, in another order, change nothing
    wider = pd.Series(pd.Categorical(values, categories=sorted(set(labels) | {v for v in values if v is not None})))
    np.testing.assert_array_equal(label_codes(wider, labels), expected)


def test_numbers_match_labels_by_their_text():
    values = pd.Series([1, "a", None, np.nan, 2.5], dtype=object)
    np.testing.assert_array_equal(label_codes(values, ["1", "a", "2.5"]), [0, 1, -1, -1, 2])
