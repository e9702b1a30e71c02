-- The forms a fit's x or y may take (spec: x = "ln(col)" ...), each of tl_value, the column's
-- value as DOUBLE (views/forms.py puts the column, or a literal limit, in its place). Each is
-- NULL outside its domain, so such a row is left out of the fit like a missing value (and
-- counted in the fit view's n_outside); none raises an error or yields NaN or infinity:
--   ln           natural logarithm, for values above 0
--   log10        base-10 logarithm, for values above 0
--   sqrt         square root, for values 0 or above
--   reciprocal   1 / value, for values other than 0
SELECT
    CASE WHEN tl_value > 0 THEN ln(tl_value) END AS ln,
    CASE WHEN tl_value > 0 THEN log10(tl_value) END AS log10,
    CASE WHEN tl_value >= 0 THEN sqrt(tl_value) END AS sqrt,
    CASE WHEN tl_value <> 0 THEN 1.0 / tl_value END AS reciprocal
