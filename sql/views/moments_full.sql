-- Centred sums of every group recomputed from every row in two passes: count, means, sxx, sxy,
-- syy, the residual sum of squares of the least-squares line, and the ranges of x and y.

-- The same columns as the fit's moments view (moments.sql), which reads the stored sums that each
-- append updates; this view reads every row, and the full fit view (fit.sql over this view) is
-- the reference the stored sums are checked against. It also computes the sums of a batch of new
-- rows and rebuilds a moments table (src/trendledger/moments.py).
--
-- One row per group (a NULL group key is a group like any other): the group columns, then n,
-- n_rows, n_outside, x_mean, y_mean, sxx, sxy, syy, rss, the ranges x_min ... y_max, rss_noise
-- and the low parts of the means x_mean_lo, y_mean_lo, as the fragment __sums__ gives them:
-- sql/fragments/sums_intercept.sql (centred sums; its comment says what each column is and how
-- it keeps its digits), or, for a fit through the origin, sql/fragments/sums_origin.sql (sxx,
-- sxy and syy about the origin: sum(x^2), sum(xy), sum(y^2); plain means, their low parts 0).
CREATE OR REPLACE VIEW __view__ AS
WITH source_rows AS NOT MATERIALIZED (
    SELECT * FROM __source__
)
SELECT
    __group__,
    n,
    n_rows,
    n_outside,
    x_mean,
    y_mean,
    sxx,
    sxy,
    syy,
    rss,
    x_min,
    x_max,
    y_min,
    y_max,
    rss_noise,
    x_mean_lo,
    y_mean_lo
FROM __sums__ AS source_rows
