-- The line with an intercept as crossing.sql projects it (reads g., a row of
-- sql/fragments/line_since_bend.sql or line_whole.sql): the line is
-- cy + slope (x - cx) with standard error sqrt(cse^2 + slope_se^2 (x - cx)^2) at x.
--   tl_cx, tl_cy    the segment's centre x and the line there (centre_x, centre_y)
--   tl_cse          the line's standard error at cx (centre_se)
SELECT
    g.centre_x AS tl_cx,
    g.centre_y AS tl_cy,
    g.centre_se AS tl_cse
