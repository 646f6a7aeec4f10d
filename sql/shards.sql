-- Recipe: one model over shards kept in separate database files.
--
-- Each shard is fitted where it lives (here: ATTACHed files; equally, separate
-- processes that each store their model BLOB in a table), and the models are
-- merged. The merged model equals the one-pass model over all rows up to
-- rounding (checked to 1e-12 relative in tests/sql/test_sql.cpp, Scale.*), in
-- any merge order, because each level's summary is an orthogonal factor and
-- factors merge exactly.
--
--   sqlite3 :memory: < sql/shards.sql      (after building; paths are examples)
.load ./build/release/groupfit
.bail on
.mode box

ATTACH 'build/shard_2026_q1.db' AS q1;
ATTACH 'build/shard_2026_q2.db' AS q2;

-- Invented example shards (skip if your shards already exist).
CREATE TABLE IF NOT EXISTS q1.deliveries(carrier TEXT, minutes REAL, distance_km REAL);
CREATE TABLE IF NOT EXISTS q2.deliveries(carrier TEXT, minutes REAL, distance_km REAL);
DELETE FROM q1.deliveries; DELETE FROM q2.deliveries;
WITH RECURSIVE c(i) AS (SELECT 0 UNION ALL SELECT i + 1 FROM c WHERE i < 999)
INSERT INTO q1.deliveries
  SELECT 'c' || (i % 3), 20 + (i % 3) * 2 + (i * 37 % 100) / 10.0, (i * 53 % 400) / 10.0 FROM c;
WITH RECURSIVE c(i) AS (SELECT 0 UNION ALL SELECT i + 1 FROM c WHERE i < 1499)
INSERT INTO q2.deliveries
  SELECT 'c' || (i % 4), 21 + (i % 4) * 2 + (i * 41 % 100) / 10.0, (i * 59 % 400) / 10.0 FROM c;

-- 1. One model per shard (in practice each shard computes and stores its own).
CREATE TEMP TABLE shard_models AS
  SELECT 'q1' AS shard, groupfit(minutes, carrier, distance_km) AS model FROM q1.deliveries
  UNION ALL
  SELECT 'q2', groupfit(minutes, carrier, distance_km) FROM q2.deliveries;

-- 2. Merge them: levels are united (c3 appears only in q2).
CREATE TEMP TABLE merged AS SELECT groupfit_merge(model) AS model FROM shard_models;

-- 3. Report from the merged model as from any other.
SELECT label, round(estimate, 4) AS estimate, round(std_error, 4) AS std_error
  FROM groupfit_coef((SELECT model FROM merged), 'coding=effect; names=carrier, distance_km');

-- The same numbers from one pass over all rows, for comparison.
SELECT label, round(estimate, 4) AS estimate, round(std_error, 4) AS std_error
  FROM groupfit_coef((SELECT groupfit(minutes, carrier, distance_km)
                        FROM (SELECT * FROM q1.deliveries UNION ALL SELECT * FROM q2.deliveries)),
                     'coding=effect; names=carrier, distance_km');
