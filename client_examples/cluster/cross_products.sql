-- The cross products of [1 X y] for linfer's "cross_products" summary, in one pass.
--
-- Table: warehouse_energy(temp_c, door_openings, pallets_received, kwh); the response is
-- kwh. Any SQL engine runs it (SQLite, DuckDB, PostgreSQL, Spark SQL, BigQuery, ...), and
-- partial results from partitions simply add up.
--
-- Output: one row.
--   n         = COUNT(*)                         -> n_observations, and xtx[0][0] (the ones)
--   sum_A     = SUM(A)                           -> xtx[0][j] (A a predictor), xty[0] (A = kwh)
--   sum_A__B  = SUM(A * B), A before B below     -> xtx[i][j], xty[i] (B = kwh), yty (kwh, kwh)
-- in the column order temp_c, door_openings, pallets_received, kwh.
--
-- Rows with a NULL in any of the four columns are left out, so every sum counts the same
-- rows (a SUM alone would skip NULLs column by column and give inconsistent sums).
-- Columns should be floating point (REAL / DOUBLE PRECISION): integer products can
-- overflow on large tables. Cross products square the condition number of the design:
-- linfer says how many digits that costs (warning cross_products_precision); the
-- triangular summary (README.md beside this file) keeps them.
SELECT
  COUNT(*) AS n,
  SUM(temp_c) AS sum_temp_c,
  SUM(door_openings) AS sum_door_openings,
  SUM(pallets_received) AS sum_pallets_received,
  SUM(kwh) AS sum_kwh,
  SUM(temp_c * temp_c) AS sum_temp_c__temp_c,
  SUM(temp_c * door_openings) AS sum_temp_c__door_openings,
  SUM(temp_c * pallets_received) AS sum_temp_c__pallets_received,
  SUM(temp_c * kwh) AS sum_temp_c__kwh,
  SUM(door_openings * door_openings) AS sum_door_openings__door_openings,
  SUM(door_openings * pallets_received) AS sum_door_openings__pallets_received,
  SUM(door_openings * kwh) AS sum_door_openings__kwh,
  SUM(pallets_received * pallets_received) AS sum_pallets_received__pallets_received,
  SUM(pallets_received * kwh) AS sum_pallets_received__kwh,
  SUM(kwh * kwh) AS sum_kwh__kwh
FROM warehouse_energy
WHERE temp_c IS NOT NULL
  AND door_openings IS NOT NULL
  AND pallets_received IS NOT NULL
  AND kwh IS NOT NULL;
