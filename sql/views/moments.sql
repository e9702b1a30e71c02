-- Sums of every group, the input of the straight-line fit: count, means, sxx, sxy, syy (centred,
-- or about the origin for a fit through the origin), the residual sum of squares of the
-- least-squares line, and the ranges of x and y.

-- One row per group (a NULL group key is a group like any other), with the group columns and:
--   n                 pairs (x, y) that count: both present and finite (BIGINT)
--   n_rows            rows of the group, counted pairs or not (BIGINT)
--   n_outside         rows whose x and y are present and finite but outside the domain of the
--                     fit's form of x or y (ln of 0, ...): left out like a missing value (BIGINT)
--   x_mean, y_mean    means of the counted pairs
--   sxx, sxy, syy     centred sums: sum((x - x_mean)^2), sum((x - x_mean)(y - y_mean)),
--                     sum((y - y_mean)^2); sxx is exactly 0 when every x is the same, and sxy,
--                     syy are exactly 0 when every y is the same
--   rss               residual sum of squares of the least-squares line, syy - sxy^2 / sxx in
--                     exact arithmetic (syy itself when sxx = 0), never negative
--   x_min ... y_max   ranges of the counted pairs
--   rss_noise         a bound on the rounding error of rss; the fit calls a group with
--                     rss <= rss_noise a perfect fit
-- A group whose pairs are all skipped has n = 0 and NULL sums, means and ranges.
-- For a fit through the origin sxx = sum(x^2), sxy = sum(xy), syy = sum(y^2), so that
-- slope = sxy / sxx as with an intercept; rss is that of the line through the origin
-- (sql/moments/merge.sql with the slot __line__ of the origin, sql/fragments/sums_origin.sql).
--
-- The view reads a stored table with one row per group, so it costs the same however long the
-- history: every append merges the sums of its new rows into the table (Chan, Golub and LeVeque
-- parallel update, sql/moments/merge.sql), and a retract or a replaced file recomputes the
-- groups it touched from their remaining rows. fit_<name>_full_moments recomputes the same
-- columns from every row in two passes (moments_full.sql).
CREATE OR REPLACE VIEW __view__ AS
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
    rss_noise
FROM __moments_table__
