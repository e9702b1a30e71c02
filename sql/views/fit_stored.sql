-- Straight-line least squares fit of y on x for every group, as stored: slope and intercept with
-- their standard errors, t test, confidence intervals, r2 and a status word per group.

-- The columns, statuses and numbers are those of fit.sql (its line through the origin for a fit
-- through the origin), computed from the fit's stored sums and kept in a table with one row per group:
-- every append refits the groups its rows touched (src/trendledger/moments.py), so reading the
-- fit costs the same however long the history, and no Student t quantile or tail is evaluated
-- at read time. fit_<name>_full computes the same columns from every row.
CREATE OR REPLACE VIEW __view__ AS
SELECT
    __group__,
    n,
    x_min,
    x_max,
    slope,
    intercept,
    r2,
    r2_adj,
    resid_sd,
    slope_se,
    intercept_se,
    slope_t,
    slope_p,
    slope_lo,
    slope_hi,
    intercept_lo,
    intercept_hi,
    status,
    n_outside
FROM __fit_table__
