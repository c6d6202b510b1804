-- A label store of schema v2 as pulsesort wrote it before schema v3 (own classes);
-- invented data (station hollowmere, invented analysts), for the upgrade test.
BEGIN TRANSACTION;
CREATE TABLE catalogs (
    catalog_id    TEXT PRIMARY KEY CHECK (length(catalog_id) > 0),
    station       TEXT,
    season        TEXT,
    path          TEXT NOT NULL,
    content_hash  TEXT NOT NULL,
    n_events      INTEGER NOT NULL CHECK (n_events >= 0),
    registered_at TEXT NOT NULL
);
INSERT INTO "catalogs" VALUES('hollowmere-2031','hollowmere','2031','/home/hollowmere/seasons/hollowmere-2031','sha256:6a796310fb57251e0a66d02f214d8d2201ca37363a3351cc8b6822dbe7c97f36',12,'2026-12-02T17:30:57.795528Z');
CREATE TABLE classes (
    name         TEXT PRIMARY KEY,
    description  TEXT NOT NULL
, added_at TEXT);
INSERT INTO "classes" VALUES('narrow_bipolar','Narrow bipolar event (compact intracloud discharge): an isolated bipolar field change some tens of microseconds long with intense VHF radiation (Smith et al. 1999; Rakov & Uman 2003, ch. 9; from memory).','2026-12-02T17:30:57.792391Z');
INSERT INTO "classes" VALUES('stepped_leader','Stepped leader pulse: one of a train of short unipolar field pulses, microseconds to tens of microseconds apart, ahead of a return stroke (Rakov & Uman 2003, ch. 4; from memory).','2026-12-02T17:30:57.792391Z');
INSERT INTO "classes" VALUES('recoil','Recoil leader / K-change pulse: a fast re-illumination of an earlier channel, VHF sources moving at about 1e6 to 1e7 m/s (Rakov & Uman 2003, ch. 9; from memory).','2026-12-02T17:30:57.792391Z');
INSERT INTO "classes" VALUES('energetic_in_cloud','Energetic in-cloud pulse: a very large, slow in-cloud field pulse during upward negative leader development, linked with terrestrial gamma-ray flashes (Lyu et al. 2015, 2016; from memory).','2026-12-02T17:30:57.792391Z');
INSERT INTO "classes" VALUES('other','fits no standard class','2026-12-02T17:30:57.794606Z');
CREATE TABLE decisions (
    decision_id  INTEGER PRIMARY KEY AUTOINCREMENT,
    catalog_id   TEXT NOT NULL,
    event_id     TEXT NOT NULL,
    label        TEXT REFERENCES classes(name),
    analyst      TEXT NOT NULL CHECK (length(analyst) > 0),
    decided_at   TEXT NOT NULL,
    origin       TEXT NOT NULL CHECK (origin IN ('import', 'review', 'rule', 'model-accepted', 'resolve', 'retract')),
    note         TEXT,
    batch_id     INTEGER REFERENCES import_batches(batch_id),
    recorded_at  TEXT NOT NULL, model_version TEXT, confidence REAL
    CHECK (confidence IS NULL OR (confidence >= 0.0 AND confidence <= 1.0)),
    FOREIGN KEY (catalog_id, event_id) REFERENCES events(catalog_id, event_id),
    CHECK ((label IS NULL) = (origin = 'retract'))
);
INSERT INTO "decisions" VALUES(1,'hollowmere-2031','ev000','recoil','wren','2031-07-20T10:00:00.000000Z','import','clear K-change',1,'2026-12-02T17:30:57.795616Z',NULL,NULL);
INSERT INTO "decisions" VALUES(2,'hollowmere-2031','ev001','recoil','wren','2031-07-20T10:01:00.000000Z','import',NULL,1,'2026-12-02T17:30:57.795616Z',NULL,NULL);
INSERT INTO "decisions" VALUES(3,'hollowmere-2031','ev002','stepped_leader','wren','2031-07-20T10:02:00.000000Z','import',NULL,1,'2026-12-02T17:30:57.795616Z',NULL,NULL);
INSERT INTO "decisions" VALUES(4,'hollowmere-2031','ev003','narrow_bipolar','wren','2031-07-20T10:03:00.000000Z','import',NULL,1,'2026-12-02T17:30:57.795616Z',NULL,NULL);
INSERT INTO "decisions" VALUES(5,'hollowmere-2031','ev001','stepped_leader','tamsin','2031-07-21T09:00:00.000000Z','review',NULL,NULL,'2026-12-02T17:30:57.796389Z','hollowmere-2031-v1',0.61);
INSERT INTO "decisions" VALUES(6,'hollowmere-2031','ev001','recoil','corvin','2031-07-22T09:00:00.000000Z','resolve','K-change, sources retrace',NULL,'2026-12-02T17:30:57.800231Z',NULL,NULL);
INSERT INTO "decisions" VALUES(7,'hollowmere-2031','ev004','other','tamsin','2031-07-21T09:05:00.000000Z','review',NULL,NULL,'2026-12-02T17:30:57.800837Z',NULL,NULL);
INSERT INTO "decisions" VALUES(8,'hollowmere-2031','ev003',NULL,'wren','2031-07-21T09:10:00.000000Z','retract','unsure now',NULL,'2026-12-02T17:30:57.801300Z',NULL,NULL);
CREATE TABLE events (
    catalog_id  TEXT NOT NULL REFERENCES catalogs(catalog_id),
    event_id    TEXT NOT NULL,
    row_index   INTEGER NOT NULL,
    PRIMARY KEY (catalog_id, event_id)
) WITHOUT ROWID;
INSERT INTO "events" VALUES('hollowmere-2031',' spaced id ',10);
INSERT INTO "events" VALUES('hollowmere-2031','007',7);
INSERT INTO "events" VALUES('hollowmere-2031','1e3',9);
INSERT INTO "events" VALUES('hollowmere-2031','NA',6);
INSERT INTO "events" VALUES('hollowmere-2031','e''; DROP TABLE decisions;--',11);
INSERT INTO "events" VALUES('hollowmere-2031','ev000',0);
INSERT INTO "events" VALUES('hollowmere-2031','ev001',1);
INSERT INTO "events" VALUES('hollowmere-2031','ev002',2);
INSERT INTO "events" VALUES('hollowmere-2031','ev003',3);
INSERT INTO "events" VALUES('hollowmere-2031','ev004',4);
INSERT INTO "events" VALUES('hollowmere-2031','ev005',5);
INSERT INTO "events" VALUES('hollowmere-2031','null',8);
CREATE TABLE import_batches (
    batch_id            INTEGER PRIMARY KEY AUTOINCREMENT,
    catalog_id          TEXT NOT NULL REFERENCES catalogs(catalog_id),
    source_path         TEXT NOT NULL,
    source_sha256       TEXT NOT NULL,
    default_analyst     TEXT,
    default_decided_at  TEXT NOT NULL,
    imported_at         TEXT NOT NULL,
    n_rows              INTEGER NOT NULL,
    n_added             INTEGER NOT NULL
);
INSERT INTO "import_batches" VALUES(1,'hollowmere-2031','/home/hollowmere/seasons/wren.csv','sha256:5e65a37d46a8b27dc2dae6c0c3f624639a340cd6a5b8602973c72055a2088065',NULL,'2026-12-02T17:30:57.795616Z','2026-12-02T17:30:57.795616Z',4,4);
CREATE TABLE review_marks (
    mark_id       INTEGER PRIMARY KEY AUTOINCREMENT,
    catalog_id    TEXT NOT NULL,
    event_id      TEXT NOT NULL,
    analyst       TEXT NOT NULL CHECK (length(analyst) > 0),
    mark          TEXT NOT NULL CHECK (mark IN ('unsure', 'skip', 'withdrawn')),
    note          TEXT,
    model_version TEXT,
    confidence    REAL CHECK (confidence IS NULL OR (confidence >= 0.0 AND confidence <= 1.0)),
    marked_at     TEXT NOT NULL,
    FOREIGN KEY (catalog_id, event_id) REFERENCES events(catalog_id, event_id)
);
INSERT INTO "review_marks" VALUES(1,'hollowmere-2031','ev005','tamsin','skip',NULL,NULL,NULL,'2026-12-02T17:30:57.801912Z');
CREATE TABLE schema_version (
    version     INTEGER PRIMARY KEY,
    applied_at  TEXT NOT NULL
);
INSERT INTO "schema_version" VALUES(2,'2026-12-02T17:30:57.792391Z');
CREATE UNIQUE INDEX decisions_identity
    ON decisions(catalog_id, event_id, analyst, decided_at, IFNULL(label, ''));
CREATE INDEX decisions_by_analyst ON decisions(analyst, decision_id);
CREATE INDEX import_batches_by_file ON import_batches(catalog_id, source_sha256);
CREATE TRIGGER decisions_no_update BEFORE UPDATE ON decisions
BEGIN SELECT RAISE(ABORT, 'decisions are append-only: record a new decision instead'); END;
CREATE TRIGGER decisions_no_delete BEFORE DELETE ON decisions
BEGIN SELECT RAISE(ABORT, 'decisions are append-only: record a retraction instead'); END;
CREATE TRIGGER events_no_update BEFORE UPDATE ON events
BEGIN SELECT RAISE(ABORT, 'the events of a registered catalog cannot change'); END;
CREATE TRIGGER events_no_delete BEFORE DELETE ON events
BEGIN SELECT RAISE(ABORT, 'the events of a registered catalog cannot change'); END;
CREATE TRIGGER catalogs_no_delete BEFORE DELETE ON catalogs
BEGIN SELECT RAISE(ABORT, 'a registered catalog cannot be removed'); END;
CREATE TRIGGER catalogs_same_content BEFORE UPDATE OF catalog_id, content_hash ON catalogs
BEGIN SELECT RAISE(ABORT, 'a registered catalog keeps its id and content hash'); END;
CREATE TRIGGER classes_no_delete BEFORE DELETE ON classes
BEGIN SELECT RAISE(ABORT, 'classes cannot be removed'); END;
CREATE INDEX review_marks_by_event
    ON review_marks(catalog_id, event_id, analyst, mark_id);
CREATE TRIGGER review_marks_no_update BEFORE UPDATE ON review_marks
BEGIN SELECT RAISE(ABORT, 'review marks are append-only'); END;
CREATE TRIGGER review_marks_no_delete BEFORE DELETE ON review_marks
BEGIN SELECT RAISE(ABORT, 'review marks are append-only'); END;
DELETE FROM "sqlite_sequence";
INSERT INTO "sqlite_sequence" VALUES('import_batches',1);
INSERT INTO "sqlite_sequence" VALUES('decisions',8);
INSERT INTO "sqlite_sequence" VALUES('review_marks',1);
COMMIT;
