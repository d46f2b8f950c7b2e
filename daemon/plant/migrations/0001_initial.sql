-- heft plant store, schema version 1.
--
-- Every time is a timestamptz in UTC. Each writer (heft.daemon.plant.writer) commits one message
-- per transaction and is idempotent: the same message written twice leaves one row.

-- Stations: registered by their first message; status from the retained S/status topic.
CREATE TABLE stations (
    station          text PRIMARY KEY,
    first_seen_utc   timestamptz NOT NULL,
    last_seen_utc    timestamptz NOT NULL,
    status           text NOT NULL DEFAULT 'unknown'
                     CHECK (status IN ('online', 'offline', 'unknown')),
    status_since_utc timestamptz
);

-- Each change of a station's availability (online/offline), oldest first.
CREATE TABLE station_status (
    station  text NOT NULL REFERENCES stations (station),
    time_utc timestamptz NOT NULL,
    status   text NOT NULL CHECK (status IN ('online', 'offline')),
    PRIMARY KEY (station, time_utc, status)
);

-- One row per measurement id over all partitions. PostgreSQL enforces a unique key on a
-- partitioned table only together with the partition key (time), so "one row per id" is kept
-- here; (station, seq) beside it lets gap detection run without reading the big table.
-- (station, seq) is not unique on purpose: a station whose database was wiped starts again at 1,
-- and its new measurements must still be stored (they have new ids).
CREATE TABLE measurement_keys (
    id       uuid PRIMARY KEY,
    station  text NOT NULL REFERENCES stations (station),
    seq      bigint NOT NULL CHECK (seq >= 1),
    time_utc timestamptz NOT NULL
);
CREATE INDEX measurement_keys_station_seq ON measurement_keys (station, seq);

-- Every captured club. Partitioned by month of the station's capture time, so a plant that keeps
-- years can drop or archive a month at a time and a month's queries read one partition.
CREATE TABLE measurements (
    id                   uuid NOT NULL,
    station              text NOT NULL,
    seq                  bigint NOT NULL,
    time_utc             timestamptz NOT NULL,
    received_utc         timestamptz NOT NULL DEFAULT now(),
    job                  text,
    club_id              text,
    spec                 text,
    club                 text,
    verdict              text NOT NULL,
    total_weight_g       double precision NOT NULL,
    total_weight_g_u     double precision,
    balance_point_in     double precision NOT NULL,
    balance_point_in_u   double precision,
    moment_g_in          double precision NOT NULL,
    moment_g_in_u        double precision,
    moment_oz_in         double precision NOT NULL,
    moment_oz_in_u       double precision,
    swingweight          text NOT NULL,
    swingweight_points   double precision NOT NULL,
    swingweight_points_u double precision,
    calibration_ids      text[] NOT NULL DEFAULT '{}',
    software_version     text NOT NULL,
    payload              jsonb NOT NULL,  -- the message as the station sent it
    PRIMARY KEY (id, time_utc)
) PARTITION BY RANGE (time_utc);

-- The questions people ask: a job; a customer order (when a station puts "order_ref" in the
-- payload); a station's day; a club's history; the measurements a calibration was used for.
CREATE INDEX measurements_job ON measurements (job, time_utc) WHERE job IS NOT NULL;
CREATE INDEX measurements_order_ref ON measurements ((payload ->> 'order_ref'), time_utc)
    WHERE payload ? 'order_ref';
CREATE INDEX measurements_station_time ON measurements (station, time_utc);
CREATE INDEX measurements_club_id ON measurements (club_id, time_utc) WHERE club_id IS NOT NULL;
CREATE INDEX measurements_calibration_ids ON measurements USING gin (calibration_ids);

-- Each raise, clear or acknowledgement of an alarm (S/alarm/event). An alarm change has no id of
-- its own; station, key, time and state together identify it.
CREATE TABLE alarm_changes (
    station      text NOT NULL REFERENCES stations (station),
    key          text NOT NULL,
    kind         text NOT NULL,
    source       text NOT NULL,
    active       boolean NOT NULL,
    acknowledged boolean NOT NULL,
    message      text NOT NULL,
    time_utc     timestamptz NOT NULL,
    received_utc timestamptz NOT NULL DEFAULT now(),
    payload      jsonb NOT NULL,
    PRIMARY KEY (station, key, time_utc, active, acknowledged)
);
CREATE INDEX alarm_changes_time ON alarm_changes (time_utc);

-- Calibration events of load-cell channels (heft.daemon.records.CalibrationRecord).
CREATE TABLE calibrations (
    id           text PRIMARY KEY,
    station      text NOT NULL REFERENCES stations (station),
    channel      text NOT NULL,
    kind         text NOT NULL,
    time_utc     timestamptz NOT NULL,
    passed       boolean NOT NULL,
    next_due     date,
    received_utc timestamptz NOT NULL DEFAULT now(),
    payload      jsonb NOT NULL
);
CREATE INDEX calibrations_station_channel ON calibrations (station, channel, time_utc);

-- Messages the writer refused (bad JSON, a field out of range, an id reused with other content),
-- kept with the reason instead of being dropped, so nothing that reached the plant is lost.
CREATE TABLE refused_messages (
    refused_id   bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    received_utc timestamptz NOT NULL DEFAULT now(),
    topic        text NOT NULL,
    payload      bytea NOT NULL,
    reason       text NOT NULL
);

-- The month partition holding p_time, created if missing. Two collectors may meet a new month at
-- the same moment: the advisory lock makes the second wait and then find the partition.
CREATE FUNCTION plant_ensure_month_partition(p_time timestamptz) RETURNS text
LANGUAGE plpgsql AS $$
DECLARE
    month_start timestamp := date_trunc('month', p_time AT TIME ZONE 'UTC');
    part text := format('measurements_%s', to_char(month_start, 'YYYY_MM'));
BEGIN
    IF to_regclass(part) IS NULL THEN
        PERFORM pg_advisory_xact_lock(hashtext('heft.plant.partitions'));
        IF to_regclass(part) IS NULL THEN
            EXECUTE format(
                'CREATE TABLE %I PARTITION OF measurements FOR VALUES FROM (%L) TO (%L)',
                part,
                month_start AT TIME ZONE 'UTC',
                (month_start + interval '1 month') AT TIME ZONE 'UTC'
            );
        END IF;
    END IF;
    RETURN part;
END
$$;

-- Maintenance: the partitions of this month and the next p_months_ahead months (run it from a
-- timer or at collector start; the writer also creates a missing month on demand).
CREATE FUNCTION plant_maintain(p_months_ahead int DEFAULT 3) RETURNS SETOF text
LANGUAGE sql AS $$
    SELECT plant_ensure_month_partition(now() + make_interval(months => m))
    FROM generate_series(0, p_months_ahead) AS m
$$;

-- The runs of sequence numbers missing from a station's stored measurements, counted from 1
-- (seq is 1-based and never reused): a station whose first stored seq is 5 has the gap 1-4.
CREATE FUNCTION measurement_gaps(p_station text)
RETURNS TABLE (first_missing bigint, last_missing bigint)
LANGUAGE sql STABLE AS $$
    SELECT prev_seq + 1, seq - 1
    FROM (
        SELECT seq, lag(seq, 1, 0::bigint) OVER (ORDER BY seq) AS prev_seq
        FROM (SELECT DISTINCT seq FROM measurement_keys WHERE station = p_station) AS s
    ) AS t
    WHERE seq > prev_seq + 1
    ORDER BY 1
$$;

SELECT plant_maintain(3);
