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
#: Diffusion after growth at the default grid (41 nodes graded to the rim, 40
#: BDF2 steps) against a series solution for a step at the rim (the hardest
#: initial condition; the error is second order in the spacing), normalised
#: concentration: measured 3e-3 at worst.
ATOL_DIFFUSION_STEP = 5e-3
#: Diffusion after growth of a grown olivine profile at the default grid
#: against a fine method-of-lines reference [mol% Fo]; a few per cent of a
#: microprobe's 1-sigma precision (about 0.2-0.5 mol%).
ATOL_DIFFUSION_FO = 0.02
#: Finite-volume sums conserved by the implicit steps (solver round-off).
ATOL_CONSERVED = 1e-12

# --- fit settings shared by tests --------------------------------------------
#: Fit settings of tests that do not test the processes after growth: the
#: section offset and the diffusion length fixed at 0 (growth only), which
#: keeps those tests as fast as before the processes were fitted.
GROWTH_ONLY = {"section_h_over_r": 0.0, "diffusion_length_um": 0.0}
#: The same for the command line.
GROWTH_ONLY_ARGS = ["--section-h-over-r", "0", "--diffusion-length-um", "0"]
