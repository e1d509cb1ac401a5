"""Named tolerances used across the tests, each with the reason for its size."""

#: Same quantity computed two ways; float64 round-off only.
RTOL_IDENTITY = 1e-12
#: Closed form versus closed form after a few dozen float operations.
ATOL_CLOSED_FORM = 1e-10
#: Mass balance must close to round-off (issue requirement).
ATOL_MASS_BALANCE = 1e-10
#: Published values given to 3-4 significant figures.
RTOL_TABLE_3SF = 5e-3
#: Hand calculation of Fo/An per spot [mol%] (acceptance criterion of the reader).
ATOL_MOL_PCT_HAND = 0.05
#: Forward-model integration error allowed against a fine reference [mol% Fo].
ATOL_INTEGRATION_FO = 1e-4
