-- Without a natural key, rows of different files that share a fit's group and x value are
-- all counted (overlapping or cumulative files): one row per such group and x, with the
-- files that hold it, for check to report.
SELECT __group__, __x__, list(DISTINCT file_id ORDER BY file_id) AS files
FROM __source__
WHERE __x__ IS NOT NULL
GROUP BY ALL
HAVING count(DISTINCT file_id) > 1
ORDER BY ALL
