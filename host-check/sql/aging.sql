-- Fleet aging per unit: the least-squares line of C/C_nominal over time, its
-- rate per year relative to the unit's commissioning value, the date it
-- crosses the end-of-life limit and the unit's status: the figures of
-- `rchold aging` (limit -20 %, horizon 12 months), in SQL that Spark SQL and
-- DataFusion both run.
--
-- Tables (from a dataset `rchold export --parquet` wrote):
--   readings  readings/ (Hive partitions station=…, day=… read as strings)
--   setups    setups/setups.parquet
--
-- Units that belong in aging: measured against a field setup (no lower
-- limit), or at a station whose units report a drift state past settling
-- (drift <> 0). Only records with their own deviation (c_dev_ppm) are used:
-- rchold computes the others' from the hold and the stage file, which SQL
-- cannot.
--
-- The line is y = a + b·x with y = 1 + c_dev_ppm·1e-6 and x the years
-- (365.25 days) since the unit's first measurement; rate = 100·b/a % per
-- year; crossing x0 = (L − 1)·a/b with L = 0.8; slope standard error
-- sqrt(SSE / (n − 2) / Sxx), SSE = Syy − Sxy²/Sxx. Status, in this order:
-- beyond-limit when 1 + (b/a)·x_last <= L; no-significant-loss when
-- b >= −2·se(b); at-risk when the crossing falls within 12 months
-- (365.25 days) of the fleet's last measurement; aging otherwise. Units with
-- fewer than 10 points or under 30 days have no line (too-few-measurements).
WITH drifting AS (
    SELECT DISTINCT station FROM readings WHERE drift <> 0
),
pts AS (
    SELECT r.station, r.unit_id, r.measured_ms, 1.0 + CAST(r.c_dev_ppm AS DOUBLE) * 1e-6 AS y
    FROM readings r
    LEFT JOIN setups s ON s.setup_id = r.setup_id
    WHERE r.c_dev_ppm IS NOT NULL
      AND (s.hold_min_ticks = 0 OR r.station IN (SELECT station FROM drifting))
),
units AS (
    SELECT station, unit_id, COUNT(*) AS n, MIN(measured_ms) AS first_ms, MAX(measured_ms) AS last_ms
    FROM pts
    GROUP BY station, unit_id
),
xy AS (
    SELECT p.station, p.unit_id, u.n, u.first_ms, u.last_ms, p.y,
           CAST(p.measured_ms - u.first_ms AS DOUBLE) / 31557600000.0 AS x
    FROM pts p
    JOIN units u ON u.station = p.station AND u.unit_id = p.unit_id
),
fit AS (
    SELECT station, unit_id, n, first_ms, last_ms,
           REGR_SLOPE(y, x) AS b,
           REGR_INTERCEPT(y, x) AS a,
           REGR_SXX(y, x) AS sxx,
           REGR_SXY(y, x) AS sxy,
           REGR_SYY(y, x) AS syy
    FROM xy
    GROUP BY station, unit_id, n, first_ms, last_ms
),
lines AS (
    SELECT station, unit_id, n, first_ms, last_ms, a, b,
           SQRT(GREATEST(syy - sxy * sxy / sxx, 0.0) / CAST(n - 2 AS DOUBLE) / sxx) AS b_se,
           CAST(last_ms - first_ms AS DOUBLE) / 31557600000.0 AS x_last,
           first_ms + ((0.8 - 1.0) * a / NULLIF(b, 0.0)) * 31557600000.0 AS forecast_ms
    FROM fit
    -- 2592000000 ms = 30 days, written as a BIGINT (Spark evaluates 30 * 86400000 as INT and overflows).
    WHERE n >= 10 AND last_ms - first_ms >= CAST(2592000000 AS BIGINT) AND sxx > 0 AND a > 0
),
now AS (
    SELECT MAX(last_ms) AS now_ms FROM units
)
SELECT station,
       unit_id,
       n,
       100.0 * b / a AS rate_pct_per_year,
       CASE WHEN 1.0 + b / a * x_last <= 0.8 OR b < -2.0 * b_se THEN forecast_ms END AS forecast_ms,
       CASE
           WHEN 1.0 + b / a * x_last <= 0.8 THEN 'beyond-limit'
           WHEN b >= -2.0 * b_se THEN 'no-significant-loss'
           WHEN forecast_ms <= now_ms + 31557600000.0 THEN 'at-risk'
           ELSE 'aging'
       END AS status
FROM lines CROSS JOIN now
ORDER BY station, unit_id
