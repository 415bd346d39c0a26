"""The archive's schema and queries, kept as data (shared by the SQLite and PostgreSQL
stores where the dialects agree). ``{now}`` stands for the database clock in seconds since
the epoch; each store substitutes its own expression. Placeholders are ``?``; the
PostgreSQL store translates them."""

from __future__ import annotations

SCHEMA_VERSION = 2

LIVE = "('queued', 'running', 'waiting')"
KEYED = "('queued', 'running', 'waiting', 'done')"

JOB_COLUMNS = (
    "id, job_key, state, backend, shots, seed, repeat, label, spec, created_at, updated_at, "
    "not_before, attempts, max_attempts, lease_owner, lease_token, lease_expires, handle, "
    "started_at, finished_at, error, cancel_requested, cost"
)

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
        f"CREATE UNIQUE INDEX jobs_live_key ON jobs (job_key) WHERE state IN {KEYED}",
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
]

INSERT_JOB = f"""
INSERT INTO jobs (id, job_key, state, backend, shots, seed, repeat, label, spec, created_at,
                  updated_at, not_before, max_attempts, cost)
VALUES (?, ?, 'queued', ?, ?, ?, ?, ?, ?, {{now}}, {{now}}, {{now}}, ?, ?)
ON CONFLICT (job_key) WHERE state IN {KEYED} DO NOTHING
RETURNING {JOB_COLUMNS}
"""

SELECT_LIVE_BY_KEY = f"SELECT {JOB_COLUMNS} FROM jobs WHERE job_key = ? AND state IN {KEYED}"

CLAIM = f"""
UPDATE jobs SET state = 'running', lease_owner = ?, lease_token = lease_token + 1,
       lease_expires = {{now}} + ?, updated_at = {{now}},
       started_at = COALESCE(started_at, {{now}})
WHERE id IN (
    SELECT id FROM jobs
    WHERE state IN ('queued', 'waiting') AND not_before <= {{now}} {{backend_filter}}
    ORDER BY not_before LIMIT ? {{lock}}
)
RETURNING {JOB_COLUMNS}
"""

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

INSERT_ATTEMPT = """
INSERT INTO attempts (job_id, number, at, error_class, message, retry_at)
SELECT id, attempts + 1, {now}, ?, ?, {now} + ? FROM jobs
WHERE id = ? AND lease_token = ? AND state = 'running'
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
