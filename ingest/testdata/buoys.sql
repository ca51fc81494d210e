-- Fictional readings from 300 moored weather buoys at four made-up sites.
CREATE TYPE site AS ENUM ('north_reef', 'kelp_bank', 'outer_shoal', 'harbour_mouth');
CREATE TABLE buoys AS
SELECT
    CAST(1000 + i AS BIGINT)                              AS station_id,
    CAST(['north_reef', 'kelp_bank', 'outer_shoal', 'harbour_mouth'][1 + i % 4] AS site) AS site,
    CAST(i % 37 AS DOUBLE) / 4.0 - 3.0                    AS water_temp,
    CAST(40 + (i * 7) % 55 AS INTEGER)                    AS humidity,
    CAST((i * 5) % 30 - 10 AS SMALLINT)                   AS wind_dir_offset,
    CAST(1000 + ((i * 11) % 50) / 2.0 AS FLOAT)           AS pressure,
    CAST((3000 + (i * 13) % 700) / 100.0 AS DECIMAL(6, 2)) AS salinity,
    CAST(i % 9 AS UTINYINT)                               AS battery_bars,
    CAST(i * 3 AS UBIGINT)                                AS uptime_min,
    (i % 2 = 0)                                           AS serviced
FROM range(300) AS t(i);
COPY (SELECT * FROM buoys ORDER BY station_id) TO '$OUT/buoys.parquet' (FORMAT PARQUET);
COPY (
    SELECT station_id,
           CASE WHEN station_id = 1004 THEN NULL ELSE site END AS site,
           water_temp,
           CASE WHEN station_id = 1016 THEN NULL ELSE humidity END AS humidity
    FROM buoys WHERE station_id < 1040 ORDER BY station_id
) TO '$OUT/buoys_null.parquet' (FORMAT PARQUET);
