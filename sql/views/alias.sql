-- The same rows as another view of the fit, under a second name.

-- Used where a name would otherwise be missing: an export recomputes the fit and its moments
-- from every row, so there the full views (fit_<name>_full, fit_<name>_full_moments) are the
-- fit and moments views themselves.
CREATE OR REPLACE VIEW __view__ AS
SELECT * FROM __same_as__
