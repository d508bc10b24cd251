"""Helpers shared by the residual test modules."""


def row_of(diag, test, against):
    """The one row of ``diag.tests`` for a test kind and a variable."""
    row = diag.tests[(diag.tests["test"] == test) & (diag.tests["against"] == against)]
    assert len(row) == 1, row
    return row.iloc[0]
