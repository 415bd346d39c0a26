"""The PostgreSQL store: one database shared by workers on several machines.

Same protocol, same queries (:mod:`jobkeeper.store.sql`) and same contract tests as the
SQLite store. Modules: ``store.py`` (the store), ``database.py`` (connections, the pool,
retries, error mapping), ``dialect.py`` and ``migrations.py``.
What is particular to PostgreSQL:

- **Clock.** ``{now}`` is ``extract(epoch from statement_timestamp())``: the server's clock
  (never a worker's), read once per statement. Not ``now()``, which is frozen at the start
  of the transaction (a finish that waited for the log lock would stamp the time it began
  waiting); not ``clock_timestamp()``, which is volatile: it changes between the columns
  of one row (``lease_expires`` and ``updated_at`` would disagree) and cannot be an index
  bound, so the claim query could not range-scan the due-jobs index.
- **Claims.** ``UPDATE … WHERE id IN (SELECT … ORDER BY not_before LIMIT n FOR UPDATE
  SKIP LOCKED) RETURNING …``: concurrent claimers skip each other's rows instead of
  waiting, and the subselect re-checks the state of a row updated since its snapshot.
  The scan walks the partial index of due jobs (queued or waiting), which finished jobs
  leave, in ``not_before`` order and stops after n rows; the claim's transaction forbids
  the sort-everything plan that stale statistics can otherwise pick.
- **The log lock.** ``finish`` first archives its results (fenced updates, in parallel
  with other finishers), then locks the single ``log_state`` row with ``SELECT … FOR
  UPDATE`` and appends. Appends of all workers are so serialised: log indexes stay
  contiguous and the saved compact range matches them. A row lock rather than an
  advisory lock: it belongs to this schema (archives in other schemas of the database
  do not wait for it) and is released by the commit. Claims never take it.
- **Transactions.** Every state change is one short transaction on a pooled connection
  (a small bounded pool, 1–4 connections by default); reads are single autocommit
  statements; no connection is held between calls, so none is held while a worker waits
  on a remote device. ``idle_in_transaction_session_timeout`` ends a transaction whose
  client stopped (its row locks are freed). A broken connection or a deadlock victim is
  retried on a fresh connection (see ``database.py``).
- **Schema.** Numbered migrations recorded in ``meta.schema_version``, applied in one
  transaction under a transaction-level advisory lock (two workers starting at once do
  not race). ``create=True`` (what ``jobkeeper init --store URL`` does) creates the
  tables; ``schema=`` puts the archive in a schema of its own (created if needed);
  otherwise it lives in the connection's current schema (the URL may set
  ``options=-csearch_path=...``).
- **Wake-ups.** ``enqueue`` sends a NOTIFY; :meth:`PostgresStore.wait_for_work` waits for
  one. It is only a hint (notifications are lost while nobody listens): polling stays the
  truth.
"""

from __future__ import annotations

from jobkeeper.store.postgres.database import redact
from jobkeeper.store.postgres.store import WAKE_CHANNEL, PostgresStore

__all__ = ["WAKE_CHANNEL", "PostgresStore", "redact"]
