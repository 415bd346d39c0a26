"""Every SQL statement of the archive, kept as data in this one module: the schema and
its numbered migrations, the queue's transitions, the reads both stores share, and the
few statements particular to one database (at the end).

``{now}`` stands for the database clock in seconds since the epoch; each store
substitutes its own expression. Placeholders are ``?``; the PostgreSQL store translates
them. The state names written here are :class:`~jobkeeper.queue.JobState` values (a unit
test holds every quoted state in this module to the enum); the migrations keep the text
they shipped with, since an archive's history must replay the same way.
"""

from __future__ import annotations

from jobkeeper.queue import KEYED_STATES, LIVE_STATES, JobState


def _states(states: frozenset[JobState]) -> str:
    return "(" + ", ".join(f"'{state}'" for state in JobState if state in states) + ")"


SCHEMA_VERSION = 6

LIVE = _states(LIVE_STATES)
KEYED = _states(KEYED_STATES)
# The claim's subselect and the due-jobs index: jobs a worker may take now or later.
DUE = _states(frozenset({JobState.QUEUED, JobState.WAITING}))

#: A job's columns, its labels last: ``{labels}`` is each store's expression for the JSON
#: array of the job's labels (the dialects name their aggregate differently).
JOB_COLUMNS = (
    "id, job_key, state, backend, shots, seed, repeat, spec, created_at, updated_at, "
    "not_before, attempts, max_attempts, lease_owner, lease_token, lease_expires, handle, "
    "started_at, finished_at, error, cancel_requested, cost, {labels}"
)
LABELS_OF_JOB = "FROM job_labels WHERE job_labels.job_id = jobs.id"

# Migrations: index i holds the statements that take schema version i to i + 1.
MIGRATIONS: list[list[str]] = [
    [
        """CREATE TABLE jobs (
            id TEXT PRIMARY KEY,
            job_key TEXT NOT NULL,
            state TEXT NOT NULL CHECK (state IN
                ('queued', 'running', 'waiting', 'done', 'failed', 'cancelled')),
            backend TEXT NOT NULL,
            shots INTEGER NOT NULL,
            seed TEXT,
            repeat INTEGER NOT NULL,
            label TEXT,
            spec TEXT NOT NULL,
            created_at DOUBLE PRECISION NOT NULL,
            updated_at DOUBLE PRECISION NOT NULL,
            not_before DOUBLE PRECISION NOT NULL,
            attempts INTEGER NOT NULL DEFAULT 0,
            max_attempts INTEGER NOT NULL,
            lease_owner TEXT,
            lease_token BIGINT NOT NULL DEFAULT 0,
            lease_expires DOUBLE PRECISION,
            handle TEXT,
            started_at DOUBLE PRECISION,
            finished_at DOUBLE PRECISION,
            error TEXT,
            cancel_requested INTEGER NOT NULL DEFAULT 0,
            cost DOUBLE PRECISION
        )""",
        # One live-or-done job per key: the index racing submitters collide on.
        "CREATE UNIQUE INDEX jobs_live_key ON jobs (job_key) "
        "WHERE state IN ('queued', 'running', 'waiting', 'done')",
        # Claims scan only due jobs: finished jobs never pile up in this index.
        "CREATE INDEX jobs_due ON jobs (not_before) WHERE state IN ('queued', 'waiting')",
        "CREATE INDEX jobs_leased ON jobs (lease_expires) WHERE state = 'running'",
        "CREATE INDEX jobs_label ON jobs (label, created_at)",
        "CREATE INDEX jobs_created ON jobs (created_at)",
        """CREATE TABLE attempts (
            job_id TEXT NOT NULL REFERENCES jobs (id),
            number INTEGER NOT NULL,
            at DOUBLE PRECISION NOT NULL,
            error_class TEXT NOT NULL,
            message TEXT NOT NULL,
            retry_at DOUBLE PRECISION,
            PRIMARY KEY (job_id, number)
        )""",
        """CREATE TABLE results (
            job_id TEXT PRIMARY KEY REFERENCES jobs (id),
            counts TEXT,
            probabilities TEXT,
            metadata TEXT NOT NULL,
            created_at DOUBLE PRECISION NOT NULL
        )""",
        """CREATE TABLE log_entries (
            idx BIGINT PRIMARY KEY,
            job_id TEXT NOT NULL UNIQUE REFERENCES jobs (id),
            envelope BYTEA NOT NULL,
            leaf_hash BYTEA NOT NULL,
            signer TEXT NOT NULL,
            created_at DOUBLE PRECISION NOT NULL
        )""",
        """CREATE TABLE checkpoints (
            size BIGINT PRIMARY KEY,
            root BYTEA NOT NULL,
            note TEXT NOT NULL,
            created_at DOUBLE PRECISION NOT NULL
        )""",
        """CREATE TABLE log_state (
            id INTEGER PRIMARY KEY CHECK (id = 1),
            size BIGINT NOT NULL,
            state BYTEA NOT NULL
        )""",
        """CREATE TABLE public_keys (
            fingerprint TEXT PRIMARY KEY,
            public_key TEXT NOT NULL,
            created_at DOUBLE PRECISION NOT NULL
        )""",
    ],
    # 2: comparisons (reruns, backend against backend, against the ideal) are archived and
    # logged like jobs, so a log entry's subject is a job or a comparison: the log table is
    # rebuilt without its reference to jobs (SQLite cannot drop a foreign key in place).
    [
        """CREATE TABLE comparisons (
            id TEXT PRIMARY KEY,
            kind TEXT NOT NULL CHECK (kind IN ('rerun', 'pair', 'ideal')),
            job_a TEXT NOT NULL REFERENCES jobs (id),
            job_b TEXT REFERENCES jobs (id),
            verdict TEXT NOT NULL,
            report TEXT NOT NULL,
            created_at DOUBLE PRECISION NOT NULL
        )""",
        "CREATE INDEX comparisons_a ON comparisons (job_a)",
        "CREATE INDEX comparisons_b ON comparisons (job_b)",
        """CREATE TABLE log_entries_v2 (
            idx BIGINT PRIMARY KEY,
            job_id TEXT NOT NULL UNIQUE,
            envelope BYTEA NOT NULL,
            leaf_hash BYTEA NOT NULL,
            signer TEXT NOT NULL,
            created_at DOUBLE PRECISION NOT NULL
        )""",
        "INSERT INTO log_entries_v2 SELECT idx, job_id, envelope, leaf_hash, signer, created_at "
        "FROM log_entries",
        "DROP TABLE log_entries",
        "ALTER TABLE log_entries_v2 RENAME TO log_entries",
    ],
    # 3: labels become a set per job (a job found again under a new label gets that label
    # too; labels annotate, nothing signs them), and attempts record the tries a backend
    # retried inside one call (in_call = 1; they use up none of the job's attempts).
    [
        """CREATE TABLE job_labels (
            job_id TEXT NOT NULL REFERENCES jobs (id),
            label TEXT NOT NULL,
            added_at DOUBLE PRECISION NOT NULL,
            PRIMARY KEY (job_id, label)
        )""",
        "CREATE INDEX job_labels_by_label ON job_labels (label, job_id)",
        "INSERT INTO job_labels (job_id, label, added_at) "
        "SELECT id, label, created_at FROM jobs WHERE label IS NOT NULL",
        "DROP INDEX jobs_label",
        "ALTER TABLE jobs DROP COLUMN label",
        "ALTER TABLE attempts ADD COLUMN in_call INTEGER NOT NULL DEFAULT 0",
    ],
    # 4: the job list (the web view) at 100,000 jobs and more: pages of one state newest
    # first, and an index holding everything a listing filters and sorts on, so that a
    # label's jobs are sorted and filtered without reading a single row.
    [
        "CREATE INDEX jobs_state_created ON jobs (state, created_at)",
        "CREATE INDEX jobs_listing ON jobs (id, created_at, state, backend)",
    ],
    # 5: sweeps. A sweep is a record of its own (its template once, what defines it); each
    # point is a job with the bindings it was made with. A point found again under its job
    # key points at that job, so a job may be a point of several sweeps.
    [
        """CREATE TABLE sweeps (
            id TEXT PRIMARY KEY,
            sweep_key TEXT NOT NULL UNIQUE,
            template_hash TEXT NOT NULL,
            template_text TEXT NOT NULL,
            definition TEXT NOT NULL,
            labels TEXT NOT NULL,
            size INTEGER NOT NULL,
            created_at DOUBLE PRECISION NOT NULL
        )""",
        """CREATE TABLE sweep_points (
            sweep_id TEXT NOT NULL REFERENCES sweeps (id),
            idx INTEGER NOT NULL,
            job_id TEXT NOT NULL REFERENCES jobs (id),
            bindings TEXT NOT NULL,
            PRIMARY KEY (sweep_id, idx)
        )""",
        "CREATE INDEX sweep_points_job ON sweep_points (job_id)",
    ],
    # 6: batches. A batch of sweep points is sealed by one statement and logged as one
    # entry (its subject id is the batch's id, bt-…); each point's job is listed with it.
    [
        """CREATE TABLE batch_points (
            job_id TEXT PRIMARY KEY REFERENCES jobs (id),
            batch_id TEXT NOT NULL
        )""",
        "CREATE INDEX batch_points_batch ON batch_points (batch_id)",
    ],
]

INSERT_JOB = f"""
INSERT INTO jobs (id, job_key, state, backend, shots, seed, repeat, spec, created_at,
                  updated_at, not_before, max_attempts, cost)
VALUES (?, ?, 'queued', ?, ?, ?, ?, ?, {{now}}, {{now}}, {{now}}, ?, ?)
ON CONFLICT (job_key) WHERE state IN {KEYED} DO NOTHING
RETURNING {JOB_COLUMNS}
"""

INSERT_SWEEP = """
INSERT INTO sweeps (id, sweep_key, template_hash, template_text, definition, labels, size,
                    created_at)
VALUES (?, ?, ?, ?, ?, ?, ?, {now})
ON CONFLICT (sweep_key) DO NOTHING
"""
SWEEP_ID_BY_KEY = "SELECT id FROM sweeps WHERE sweep_key = ?"
# A point submitted again whose earlier job failed or was cancelled now points at the
# job that replaced it.
UPSERT_SWEEP_POINT = """
INSERT INTO sweep_points (sweep_id, idx, job_id, bindings) VALUES (?, ?, ?, ?)
ON CONFLICT (sweep_id, idx) DO UPDATE SET job_id = excluded.job_id
"""

SELECT_LIVE_BY_KEY = f"SELECT {JOB_COLUMNS} FROM jobs WHERE job_key = ? AND state IN {KEYED}"

CLAIM = f"""
UPDATE jobs SET state = 'running', lease_owner = ?, lease_token = lease_token + 1,
       lease_expires = {{now}} + ?, updated_at = {{now}},
       started_at = COALESCE(started_at, {{now}})
WHERE id IN (
    SELECT id FROM jobs
    WHERE state IN {DUE} AND not_before <= {{now}} {{backend_filter}}
    ORDER BY not_before LIMIT ? {{lock}}
)
RETURNING {JOB_COLUMNS}
"""

# A batch: due queued points of one sweep (the sweep of the point due first), claimed at
# once. Jobs whose cancellation was asked are left to the ordinary claim.
BATCH_SWEEP = """
SELECT sp.sweep_id FROM jobs JOIN sweep_points sp ON sp.job_id = jobs.id
WHERE jobs.state = 'queued' AND jobs.handle IS NULL AND jobs.cancel_requested = 0
  AND jobs.not_before <= {now} {backend_filter}
ORDER BY jobs.not_before LIMIT 1
"""
CLAIM_BATCH = f"""
UPDATE jobs SET state = 'running', lease_owner = ?, lease_token = lease_token + 1,
       lease_expires = {{now}} + ?, updated_at = {{now}},
       started_at = COALESCE(started_at, {{now}})
WHERE id IN (
    SELECT jobs.id FROM jobs JOIN sweep_points sp ON sp.job_id = jobs.id
    WHERE sp.sweep_id = ? AND jobs.state = 'queued' AND jobs.handle IS NULL
      AND jobs.cancel_requested = 0 AND jobs.not_before <= {{now}} {{backend_filter}}
    ORDER BY jobs.not_before, sp.idx LIMIT ? {{lock}}
)
RETURNING {JOB_COLUMNS}
"""
INSERT_BATCH_POINT = "INSERT INTO batch_points (job_id, batch_id) VALUES (?, ?)"

RENEW = """
UPDATE jobs SET lease_expires = {now} + ?
WHERE id = ? AND lease_token = ? AND lease_owner = ? AND state = 'running'
"""

RECORD_HANDLE = """
UPDATE jobs SET state = 'waiting', handle = ?, not_before = {now} + ?, lease_owner = NULL,
       lease_expires = NULL, updated_at = {now}
WHERE id = ? AND lease_token = ? AND state = 'running'
"""

SNOOZE = """
UPDATE jobs SET state = 'waiting', not_before = {now} + ?, lease_owner = NULL,
       lease_expires = NULL, updated_at = {now}
WHERE id = ? AND lease_token = ? AND state = 'running'
"""

# Attempts are numbered per job in the order they happened, tries inside a call included.
NEXT_ATTEMPT = "(SELECT COALESCE(MAX(a.number), 0) + 1 FROM attempts a WHERE a.job_id = jobs.id)"

INSERT_ATTEMPT = f"""
INSERT INTO attempts (job_id, number, at, error_class, message, retry_at)
SELECT id, {NEXT_ATTEMPT}, {{now}}, ?, ?, {{now}} + ? FROM jobs
WHERE id = ? AND lease_token = ? AND state = 'running'
"""

# A try the backend retried inside one call, ``?`` seconds ago (measured on the worker's
# monotonic clock, so the time is on the database's clock like every other).
INSERT_TRY_IN_CALL = f"""
INSERT INTO attempts (job_id, number, at, error_class, message, retry_at, in_call)
SELECT id, {NEXT_ATTEMPT}, {{now}} - ?, ?, ?, NULL, 1 FROM jobs
WHERE id = ? AND lease_token = ? AND state = 'running'
"""

ADD_LABEL = """
INSERT INTO job_labels (job_id, label, added_at) VALUES (?, ?, {now})
ON CONFLICT (job_id, label) DO NOTHING
"""

RETRY = """
UPDATE jobs SET attempts = attempts + 1, error = ?, updated_at = {now},
       lease_owner = NULL, lease_expires = NULL, not_before = {now} + ?,
       state = CASE WHEN attempts + 1 >= max_attempts THEN 'failed'
                    WHEN handle IS NULL THEN 'queued' ELSE 'waiting' END,
       finished_at = CASE WHEN attempts + 1 >= max_attempts THEN {now} ELSE NULL END
WHERE id = ? AND lease_token = ? AND state = 'running'
RETURNING state, attempts
"""

FAIL = """
UPDATE jobs SET attempts = attempts + 1, error = ?, updated_at = {now}, state = 'failed',
       lease_owner = NULL, lease_expires = NULL, finished_at = {now}
WHERE id = ? AND lease_token = ? AND state = 'running'
"""

FINISH = """
UPDATE jobs SET state = 'done', updated_at = {now}, finished_at = {now},
       lease_owner = NULL, lease_expires = NULL, error = NULL
WHERE id = ? AND lease_token = ? AND state = 'running'
"""

INSERT_RESULT = """
INSERT INTO results (job_id, counts, probabilities, metadata, created_at)
VALUES (?, ?, ?, ?, {now})
"""

INSERT_COMPARISON = """
INSERT INTO comparisons (id, kind, job_a, job_b, verdict, report, created_at)
VALUES (?, ?, ?, ?, ?, ?, {now})
"""

COMPARISON_COLUMNS = "id, kind, job_a, job_b, verdict, report, created_at"

INSERT_LOG_ENTRY = """
INSERT INTO log_entries (idx, job_id, envelope, leaf_hash, signer, created_at)
VALUES (?, ?, ?, ?, ?, {now})
"""

RELEASE = """
UPDATE jobs SET state = CASE WHEN handle IS NULL THEN 'queued' ELSE 'waiting' END,
       lease_owner = NULL, lease_expires = NULL, not_before = {now}, updated_at = {now}
WHERE id = ? AND lease_token = ? AND lease_owner = ? AND state = 'running'
"""

# A rescue is one conditional update, never a read-then-write: a job that finished between
# a read and a write must not be overwritten.
REQUEUE_EXPIRED = """
UPDATE jobs SET state = CASE WHEN handle IS NULL THEN 'queued' ELSE 'waiting' END,
       lease_owner = NULL, lease_expires = NULL, not_before = {now}, updated_at = {now}
WHERE state = 'running' AND lease_expires < {now}
"""

CANCEL_QUEUED = """
UPDATE jobs SET state = 'cancelled', cancel_requested = 1, updated_at = {now},
       finished_at = {now}
WHERE id = ? AND state = 'queued' AND handle IS NULL
"""

REQUEST_CANCEL = f"""
UPDATE jobs SET cancel_requested = 1, updated_at = {{now}},
       not_before = CASE WHEN state = 'running' THEN not_before ELSE {{now}} END
WHERE id = ? AND state IN {LIVE}
"""

MARK_CANCELLED = """
UPDATE jobs SET state = 'cancelled', updated_at = {now}, finished_at = {now},
       lease_owner = NULL, lease_expires = NULL
WHERE id = ? AND lease_token = ? AND state = 'running'
"""

INSERT_CHECKPOINT = "INSERT INTO checkpoints (size, root, note, created_at) VALUES (?, ?, ?, {now})"

SAVE_LOG_STATE = """
INSERT INTO log_state (id, size, state) VALUES (1, ?, ?)
ON CONFLICT (id) DO UPDATE SET size = excluded.size, state = excluded.state
"""

READ_LOG_STATE = "SELECT size, state FROM log_state WHERE id = 1"

REGISTER_KEY = """
INSERT INTO public_keys (fingerprint, public_key, created_at) VALUES (?, ?, {now})
ON CONFLICT (fingerprint) DO NOTHING
"""

#: The database clock, as every statement here reads it.
CLOCK = "SELECT {now}"

# -- metadata (schema version, the keep's identity) ----------------------------------------

CREATE_META = "CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT)"
GET_META = "SELECT value FROM meta WHERE key = ?"
SET_META = """
INSERT INTO meta (key, value) VALUES (?, ?)
ON CONFLICT (key) DO UPDATE SET value = excluded.value
"""
ENSURE_META = "INSERT INTO meta (key, value) VALUES (?, ?) ON CONFLICT (key) DO NOTHING"

# -- reads both stores share -----------------------------------------------------------------

JOB_BY_PREFIX = f"SELECT {JOB_COLUMNS} FROM jobs WHERE id >= ? AND id < ? ORDER BY id LIMIT 2"
JOBS_BY_IDS = f"SELECT {JOB_COLUMNS} FROM jobs WHERE id IN ({{marks}})"
LIST_JOBS = f"SELECT {JOB_COLUMNS} FROM jobs {{where}} ORDER BY created_at, id {{limit}}"
#: Conditions of a job listing, joined with AND (each takes one parameter).
JOBS_WITH_LABEL = "id IN (SELECT job_id FROM job_labels WHERE label = ?)"
JOBS_IN_STATE = "state = ?"
JOBS_ON_BACKEND = "backend = ?"
JOBS_CREATED_FROM = "created_at >= ?"
JOBS_CREATED_BEFORE = "created_at < ?"
#: A page of jobs, newest first, after a keyset cursor (the last row of the page before:
#: its created_at twice, then its id), so that a deep page costs what the first one does.
JOBS_BEFORE_CURSOR = "(created_at < ? OR (created_at = ? AND id < ?))"
#: The ids of a page (read from indexes alone); the rows are then read by id.
PAGE_JOB_IDS = "SELECT id FROM jobs {hint} {where} ORDER BY created_at DESC, id DESC LIMIT ?"
JOBS_IN_SWEEP = "id IN (SELECT job_id FROM sweep_points WHERE sweep_id = ?)"
COUNT_JOBS = "SELECT COUNT(*) FROM jobs {where}"
COUNT_BY_STATE = "SELECT state, COUNT(*) FROM jobs GROUP BY state"
ATTEMPTS_OF = """
SELECT job_id, number, at, error_class, message, retry_at, in_call FROM attempts
WHERE job_id = ? ORDER BY number
"""
RESULT_OF = """
SELECT job_id, counts, probabilities, metadata, created_at FROM results WHERE job_id = ?
"""
JOB_KEYS_IN_STATE = "SELECT id, job_key FROM jobs WHERE state = ?"
ALL_COUNTS = "SELECT job_id, counts FROM results"
#: What verify compares with the signed statements, in one read each.
ALL_RESULT_TEXTS = "SELECT job_id, probabilities, metadata FROM results"
ALL_ATTEMPTS = """
SELECT job_id, number, at, error_class, message, retry_at, in_call FROM attempts
ORDER BY job_id, number
"""
SWEEP_COLUMNS = "id, sweep_key, template_hash, template_text, definition, labels, size, created_at"
# Compared as text, whatever the database's collation (sweeps are few: no index needed).
SWEEP_BY_PREFIX = (
    f"SELECT {SWEEP_COLUMNS} FROM sweeps WHERE substr(id, 1, ?) = ? ORDER BY id LIMIT 2"
)
SWEEP_POINTS = "SELECT idx, job_id, bindings FROM sweep_points WHERE sweep_id = ? ORDER BY idx"
SWEEPS_OF_JOBS = "SELECT job_id, sweep_id, idx FROM sweep_points WHERE job_id IN ({marks})"
LOG_ENTRY_COLUMNS = "idx, job_id, envelope, leaf_hash, signer, created_at"
# A job's own entry, or its batch's (a job has one of the two: verify checks it).
LOG_ENTRY_FOR = (
    f"SELECT {LOG_ENTRY_COLUMNS} FROM log_entries WHERE job_id = ? UNION ALL "
    f"SELECT {LOG_ENTRY_COLUMNS} FROM log_entries "
    "WHERE job_id = (SELECT batch_id FROM batch_points WHERE job_id = ?)"
)
BATCH_MEMBERS = "SELECT job_id, batch_id FROM batch_points"
LOG_ENTRIES = f"SELECT {LOG_ENTRY_COLUMNS} FROM log_entries WHERE idx >= ? AND idx < ? ORDER BY idx"
CHECKPOINTS = "SELECT size, root, note, created_at FROM checkpoints ORDER BY size"
COMPARISONS = f"SELECT {COMPARISON_COLUMNS} FROM comparisons {{where}} ORDER BY created_at"
COMPARISONS_OF_JOB = "WHERE job_a = ? OR job_b = ?"
PUBLIC_KEYS = "SELECT fingerprint, public_key FROM public_keys ORDER BY created_at, fingerprint"
SPENT = f"SELECT COALESCE(SUM(cost), 0) FROM jobs WHERE state IN {KEYED}"

# -- SQLite only -------------------------------------------------------------------------------

SQLITE_NOW = "((julianday('now') - 2440587.5) * 86400.0)"
SQLITE_LABELS = f"(SELECT json_group_array(label) {LABELS_OF_JOB})"
SQLITE_OPEN = ("PRAGMA journal_mode=WAL", "PRAGMA synchronous=FULL", "PRAGMA foreign_keys=ON")
SQLITE_SYNC_FULL = "PRAGMA synchronous=FULL"
SQLITE_SYNC_NORMAL = "PRAGMA synchronous=NORMAL"
#: Without statistics (no ANALYZE has run on a user's keep) SQLite looks a label's job ids
#: up in the primary key's index and reads every row for its time; the listing index
#: holds the time itself. PostgreSQL's planner needs no hint.
SQLITE_LISTING_HINT = "INDEXED BY jobs_listing"
SQLITE_BEGIN = "BEGIN IMMEDIATE"
SQLITE_COMMIT = "COMMIT"
SQLITE_ROLLBACK = "ROLLBACK"

# -- PostgreSQL only ---------------------------------------------------------------------------

PG_NOW = "extract(epoch from statement_timestamp())::float8"
PG_LABELS = f"(SELECT json_agg(label)::text {LABELS_OF_JOB})"
#: Serialises migrations of one schema (keyed by a hash of the schema's name, so archives
#: in other schemas of the same database do not wait for each other).
PG_MIGRATION_LOCK = "SELECT pg_advisory_xact_lock(?, hashtext(coalesce(?, current_schema(), '')))"
PG_CREATE_SCHEMA = "CREATE SCHEMA IF NOT EXISTS {}"
PG_WHERE_AM_I = "SELECT current_schema(), current_setting('search_path')"
PG_HAS_META = "SELECT to_regclass('meta') IS NOT NULL"
PG_IDLE_TIMEOUT = "SET idle_in_transaction_session_timeout = {}"
PG_SEARCH_PATH = "SET search_path TO {}"
#: The log_state row exists from the start on PostgreSQL, so appends can lock it.
PG_LOG_STATE_SEED = (
    "INSERT INTO log_state (id, size, state) VALUES (1, 0, '') ON CONFLICT (id) DO NOTHING"
)
#: PostgreSQL-only statements that go with each schema version (numbered as MIGRATIONS).
PG_EXTRAS: dict[int, list[str]] = {0: [PG_LOG_STATE_SEED]}
PG_LOCK_LOG = "SELECT size, state FROM log_state WHERE id = 1 FOR UPDATE"
PG_UPDATE_LOG_STATE = "UPDATE log_state SET size = ?, state = ? WHERE id = 1"
PG_CLAIM_PLAN = "SET LOCAL enable_sort = off"
PG_WAKE_CHANNEL = "jobkeeper_work"
PG_NOTIFY = "SELECT pg_notify(?, '')"
PG_LISTEN = f"LISTEN {PG_WAKE_CHANNEL}"
# Pipelined and retried statements report what they touched; a retried comparison insert
# (after a commit whose answer was lost) adds nothing.
PG_RENEW = RENEW.rstrip() + " RETURNING id"
PG_FINISH = FINISH.rstrip() + " RETURNING id"
PG_INSERT_COMPARISON = INSERT_COMPARISON.rstrip() + " ON CONFLICT (id) DO NOTHING RETURNING id"
