"""The job states and their moves: one enum and one table (DESIGN §3 draws them), which
the stores' SQL and schema must agree with."""

from __future__ import annotations

import re

from jobkeeper.queue import KEYED_STATES, LIVE_STATES, TERMINAL_STATES, TRANSITIONS, JobState
from jobkeeper.store import sql

Q, R, W, D, F, C = (
    JobState.QUEUED,
    JobState.RUNNING,
    JobState.WAITING,
    JobState.DONE,
    JobState.FAILED,
    JobState.CANCELLED,
)


def test_the_table_holds_exactly_the_moves_of_the_design() -> None:
    # DESIGN §3: queued → running → waiting → done | failed | cancelled; a transient failure
    # (or a released or expired lease) goes back to queued, or waiting with a handle; a
    # due poll claims a waiting job again; a queued job may be cancelled before any claim.
    expected = {
        (Q, R), (Q, C),
        (R, W), (R, Q), (R, D), (R, F), (R, C),
        (W, R),
    }  # fmt: skip
    table = {(a, b) for a, targets in TRANSITIONS.items() for b in targets}
    assert table == expected
    assert set(TRANSITIONS) == set(JobState)


def test_terminal_states_have_no_way_out_and_every_state_is_reachable() -> None:
    assert {D, F, C} == TERMINAL_STATES
    assert all(not TRANSITIONS[s] and s.terminal for s in TERMINAL_STATES)
    assert set(JobState) - TERMINAL_STATES == LIVE_STATES
    assert LIVE_STATES | {D} == KEYED_STATES
    seen, frontier = {Q}, [Q]
    while frontier:
        for nxt in TRANSITIONS[frontier.pop()]:
            if nxt not in seen:
                seen.add(nxt)
                frontier.append(nxt)
    assert seen == set(JobState)
    # every live state can still end: no trap outside the terminal states
    assert all(s.can_move_to(R) or s == R for s in LIVE_STATES)
    assert all(R.can_move_to(t) for t in TERMINAL_STATES)


def test_states_print_as_their_stored_words() -> None:
    assert [str(s) for s in JobState] == [
        "queued", "running", "waiting", "done", "failed", "cancelled",
    ]  # fmt: skip
    assert JobState("done") == "done" and not Q.can_move_to(D)


def test_every_state_word_in_the_sql_is_a_job_state() -> None:
    words = {"queued", "running", "waiting", "done", "failed", "cancelled"}
    texts = [v for v in vars(sql).values() if isinstance(v, str)]
    texts += [s for step in sql.MIGRATIONS for s in step]
    quoted = {m for text in texts for m in re.findall(r"'([a-z]+)'", text)}
    # Besides state words, the SQL quotes only comparison kinds, a table name and the
    # argument of SQLite's clock (julianday('now')).
    assert quoted - words <= {"rerun", "pair", "ideal", "meta", "now"}
    assert quoted & words == {s.value for s in JobState}
    # The schema's CHECK constraint lists exactly the enum.
    [check] = re.findall(r"state IN\s*\(([^)]*)\)\)", sql.MIGRATIONS[0][0])
    assert set(re.findall(r"'([a-z]+)'", check)) == {s.value for s in JobState}
