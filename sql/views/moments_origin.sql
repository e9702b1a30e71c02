-- Sums about the origin of every group, the input of the fit through the origin: count, means,
-- sum(x^2), sum(xy), sum(y^2), the residual sum of squares of y = slope x, and the ranges.

-- The columns are those of the centred moments (moments.sql) with sxx, sxy and syy taken about
-- the origin instead of the means: sxx = sum(x^2), sxy = sum(xy), syy = sum(y^2), so that
-- slope = sxy / sxx as with an intercept. x_mean and y_mean are the plain means. rss is the
-- residual sum of squares of the least-squares line through the origin, syy - sxy^2 / sxx in
-- exact arithmetic (syy itself when sxx = 0), never negative; rss_noise bounds its rounding
-- error. n counts the pairs (x, y) with both values present and finite, n_rows every row.
--
-- The view reads a stored table with one row per group, so it costs the same however long the
-- history: every append adds the sums of its new rows to the table (sql/moments/merge_origin.sql),
-- and a retract or a replaced file recomputes the groups it touched from their remaining rows.
-- fit_<name>_full_moments recomputes the same columns from every row (moments_full_origin.sql).
CREATE OR REPLACE VIEW __view__ AS
SELECT
    __group__,
    n,
    n_rows,
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
