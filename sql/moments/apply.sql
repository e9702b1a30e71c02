-- Write merged sums (the temporary table tl_mmerged, one row per group) into a fit's moments
-- table: groups it holds are updated, new groups are added; the groups go on the list of those
-- to refit (tl_mkeys).
UPDATE __table__ AS t
SET
    n = m.n,
    n_rows = m.n_rows,
    n_outside = m.n_outside,
    x_mean = m.x_mean,
    y_mean = m.y_mean,
    sxx = m.sxx,
    sxy = m.sxy,
    syy = m.syy,
    rss = m.rss,
    x_min = m.x_min,
    x_max = m.x_max,
    y_min = m.y_min,
    y_max = m.y_max,
    rss_noise = m.rss_noise,
    x_mean_lo = m.x_mean_lo,
    y_mean_lo = m.y_mean_lo
FROM tl_mmerged AS m
WHERE ROW(t.__group__) IS NOT DISTINCT FROM ROW(m.__group__);

INSERT INTO __table__
SELECT *
FROM tl_mmerged AS m
WHERE NOT EXISTS (
    SELECT 1 FROM __table__ AS t WHERE ROW(t.__group__) IS NOT DISTINCT FROM ROW(m.__group__)
);

INSERT INTO tl_mkeys
SELECT __group__ FROM tl_mmerged;
