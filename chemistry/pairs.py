"""The six pairs of measurable quantities ``solve`` takes, in one order used everywhere.

In the order of the parameters of :func:`chemistry.solve` (ph, alkalinity, dic, pco2); the
compiled kernel numbers its pairs by position in this tuple.
"""

INPUT_PAIRS: tuple[tuple[str, str], ...] = (
    ("ph", "alkalinity"),
    ("ph", "dic"),
    ("ph", "pco2"),
    ("alkalinity", "dic"),
    ("alkalinity", "pco2"),
    ("dic", "pco2"),
)
