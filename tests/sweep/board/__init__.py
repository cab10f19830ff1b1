"""The board's tests, a package so their module names (``test_data``, ...) do not clash with other folders'."""
