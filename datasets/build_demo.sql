-- Build the invented groupfit demo database from the CSVs in datasets/.
-- Run from the repository root:
--     mkdir -p build
--     sqlite3 build/demo.db < datasets/build_demo.sql
-- Safe to rerun: existing demo tables are dropped and rebuilt.
--
-- The sqlite3 shell's .import stores empty CSV fields as empty strings, so
-- the files are first imported into all-TEXT staging tables and then copied
-- with NULLIF(...,'') and CAST so that empty fields become real NULLs.

.bail on

DROP TABLE IF EXISTS deliveries;
DROP TABLE IF EXISTS depots;
DROP TABLE IF EXISTS staging_deliveries;
DROP TABLE IF EXISTS staging_depots;

CREATE TABLE staging_depots (
    depot_id   TEXT,
    depot_name TEXT,
    region     TEXT
);
CREATE TABLE staging_deliveries (
    delivery_id TEXT,
    depot_id    TEXT,
    carrier     TEXT,
    shift       TEXT,
    distance_km TEXT,
    weight_kg   TEXT,
    minutes     TEXT
);

-- The staging tables already exist, so --skip 1 drops the header line.
.import --csv --skip 1 datasets/depots.csv staging_depots
.import --csv --skip 1 datasets/deliveries.csv staging_deliveries

CREATE TABLE depots (
    depot_id   INTEGER PRIMARY KEY,
    depot_name TEXT NOT NULL,
    region     TEXT NOT NULL
);

CREATE TABLE deliveries (
    delivery_id INTEGER PRIMARY KEY,
    depot_id    INTEGER REFERENCES depots(depot_id),
    carrier     TEXT,
    shift       TEXT,
    distance_km REAL,
    weight_kg   REAL,
    minutes     REAL
);

BEGIN;
INSERT INTO depots (depot_id, depot_name, region)
SELECT CAST(depot_id AS INTEGER), depot_name, region
FROM staging_depots;

INSERT INTO deliveries
    (delivery_id, depot_id, carrier, shift, distance_km, weight_kg, minutes)
SELECT CAST(delivery_id AS INTEGER),
       CAST(NULLIF(depot_id, '')    AS INTEGER),
       NULLIF(carrier, ''),
       NULLIF(shift, ''),
       CAST(NULLIF(distance_km, '') AS REAL),
       CAST(NULLIF(weight_kg, '')   AS REAL),
       CAST(NULLIF(minutes, '')     AS REAL)
FROM staging_deliveries;
COMMIT;

DROP TABLE staging_deliveries;
DROP TABLE staging_depots;

CREATE INDEX deliveries_carrier ON deliveries(carrier);
CREATE INDEX deliveries_depot   ON deliveries(depot_id);

VACUUM;
