-- Fixture yield per station and per station and UTC day, with Cp and Cpk of
-- the hold against the pass window: the figures of `rchold yield
-- --skip-recheck`, in SQL that Spark SQL and DataFusion both run.
--
-- Tables (from a dataset `rchold export --parquet` wrote):
--   readings  readings/ (Hive partitions station=…, day=… read as strings)
--   setups    setups/setups.parquet
-- Codes: verdict 0 = within-window, 1 short, 2 long, 7 fast-start,
-- 8 slow-start (the verdicts decided by the hold); hint 1 = wrong-part,
-- 4 = open-capacitor-or-diode (gross faults, left out of the capability).
-- The full list is in codes/codes.parquet.
--
-- One setup per station is assumed for the window (rchold draws the first
-- setup's window too). Integer columns are cast to DOUBLE before dividing:
-- DataFusion divides integers as integers, Spark does not. Divisors that
-- can be zero go through NULLIF (Spark's ANSI mode refuses x / 0).
WITH judged AS (
    SELECT r.station,
           r.measured_ms,
           r.verdict,
           CASE
               WHEN r.verdict IN (0, 1, 2, 7, 8) AND r.hold_ticks IS NOT NULL AND r.hint NOT IN (1, 4)
               THEN CAST(r.hold_ticks AS DOUBLE) / CAST(r.clock_hz AS DOUBLE)
           END AS hold_s,
           CAST(s.hold_min_ticks AS DOUBLE) / CAST(s.clock_hz AS DOUBLE) AS lsl_s,
           CAST(s.hold_max_ticks AS DOUBLE) / CAST(s.clock_hz AS DOUBLE) AS usl_s
    FROM readings r
    LEFT JOIN setups s ON s.setup_id = r.setup_id
    -- A field setup (no lower limit) judges no production: its records are aging's.
    WHERE s.setup_id IS NULL OR s.hold_min_ticks > 0
),
per_station AS (
    SELECT station,
           COUNT(*) AS total,
           SUM(CASE WHEN verdict = 0 THEN 1 ELSE 0 END) AS passed,
           COUNT(hold_s) AS holds,
           AVG(hold_s) AS hold_mean_s,
           STDDEV_SAMP(hold_s) AS hold_sd_s,
           MIN(lsl_s) AS lsl_s,
           MIN(usl_s) AS usl_s
    FROM judged
    GROUP BY station
)
SELECT 'station' AS level,
       station,
       CAST(NULL AS BIGINT) AS day,
       total,
       passed,
       CAST(passed AS DOUBLE) / CAST(total AS DOUBLE) AS yield,
       holds,
       hold_mean_s,
       hold_sd_s,
       (usl_s - lsl_s) / NULLIF(6 * hold_sd_s, 0.0) AS cp,
       LEAST(usl_s - hold_mean_s, hold_mean_s - lsl_s) / NULLIF(3 * hold_sd_s, 0.0) AS cpk
FROM per_station
UNION ALL
SELECT 'day' AS level,
       station,
       CAST(FLOOR(CAST(measured_ms AS DOUBLE) / 86400000.0) AS BIGINT) AS day,
       COUNT(*) AS total,
       SUM(CASE WHEN verdict = 0 THEN 1 ELSE 0 END) AS passed,
       CAST(SUM(CASE WHEN verdict = 0 THEN 1 ELSE 0 END) AS DOUBLE) / CAST(COUNT(*) AS DOUBLE) AS yield,
       COUNT(hold_s) AS holds,
       AVG(hold_s) AS hold_mean_s,
       CAST(NULL AS DOUBLE) AS hold_sd_s,
       CAST(NULL AS DOUBLE) AS cp,
       CAST(NULL AS DOUBLE) AS cpk
FROM judged
GROUP BY station, CAST(FLOOR(CAST(measured_ms AS DOUBLE) / 86400000.0) AS BIGINT)
ORDER BY level, station, day
