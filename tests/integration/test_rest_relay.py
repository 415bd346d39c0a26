"""Profile format 2 end to end, fourth shape: worker processes against the loopback device
in its relay preset (OAuth client credentials sent as form fields, tokens that live one
second; the program sent as OpenQASM 3 text; the whole path of a Location as the handle;
200 with the existing job on a repeated key; outcomes over pages chained by a URL in the
answer, alternately absolute and relative), in every outcome form the device offers,
with faults on: 503 with Retry-After, tokens expiring early and dropped connections."""

from __future__ import annotations

import time
from pathlib import Path
from typing import Any

import httpx
import pytest

from jobkeeper.backends.rest.profile import load_profile
from jobkeeper.circuit import parse_qasm
from jobkeeper.circuit.openqasm3 import openqasm3_text
from jobkeeper.loopback.testing import CLIENT_ID, running_device
from tests.integration.rest_presets import (
    PROGRAM,
    assert_every_job_done_once,
    drain_with_faults,
    repeat_after_lost_answer,
)

SHIPPED = Path(__file__).resolve().parents[2] / "jobkeeper" / "profiles" / "loopback-relay.toml"
#: the device's outcome forms → how the profile reads them: (counts or samples, encoding,
#: bit order)
FORMS = {
    "hex-counts": ("counts", "hex", "c0_right"),  # {"0x5": 12}
    "decimal-counts": ("counts", "integers", "c0_right"),  # {"5": 12}
    "bit-counts": ("counts", "bitstrings", "c0_left"),  # {"101": 12}, c[0] leftmost
    "bit-shots": ("samples", "bitstrings", "c0_right"),  # ["101", ...], c[0] rightmost
    "integer-shots": ("samples", "integers", "c0_right"),  # [5, ...]
}


def relay_profile(tmp_path: Path, form: str) -> Path:
    """The shipped relay profile, reading outcomes in ``form``."""
    where, encoding, order = FORMS[form]
    text = SHIPPED.read_text(encoding="utf-8")
    for old, new in [
        ("?form=hex-counts", f"?form={form}"),
        ('counts = "/outcomes"', f'{where} = "/outcomes"'),
        ('encoding = "hex"', f'encoding = "{encoding}"'),
        ('bit_order = "c0_right"', f'bit_order = "{order}"'),
    ]:
        assert old in text
        text = text.replace(old, new, 1)
    path = tmp_path / f"relay-{form}.toml"
    path.write_text(text, encoding="utf-8")
    load_profile(str(path))
    return path


@pytest.mark.parametrize("form", sorted(FORMS))
def test_relay_preset_through_the_worker_with_faults_in_every_outcome_form(
    tmp_path: Path, form: str
) -> None:
    run = drain_with_faults(
        tmp_path, backend={"profile": str(relay_profile(tmp_path, form))}, preset="relay",
        queue_delay=0.3, fault_rate=0.25, faults=("503", "expire", "drop"), seed=7,
        token_ttl=1.0, page_size=3,
        # each kind at least once, whichever requests the random draws fall on (a token
        # is not revoked on its first use, so expiry is asked for on several polls)
        forced=(("503", "POST", "/v4/jobs", 1), ("drop", "GET", "/v4/queues/", 1),
                ("expire", "GET", "/v4/queues/", 3)),
    )  # fmt: skip

    def ran_the_same_circuit(job: Any) -> None:
        # the device parsed the OpenQASM 3 text it was sent into the very circuit
        device_job = job.record.handle.rsplit("/", 1)[-1]
        assert run.extra[device_job]["circuit_hash"] == job.record.spec.circuit_hash
        # the whole path of the Location is the handle: /v4/queues/<queue>/jobs/<id>
        assert "job=/v4/queues/" in job.record.handle

    assert_every_job_done_once(run, circuit_of=ran_the_same_circuit)
    assert run.stats["faults"].keys() >= {"503", "expire", "drop"}
    assert len(run.secrets) >= 3  # tokens expired and were fetched again


def test_a_repeated_key_is_answered_200_with_the_existing_job(tmp_path: Path) -> None:
    stats, state, counts = repeat_after_lost_answer(
        tmp_path, "/v4/jobs", preset="relay", queue_delay=0.2, page_size=2
    )
    assert stats["submits"] == 2 and stats["replays"] == 1 and stats["executions"] == 1
    assert state == "done" and sum(counts.values()) == 10


def _bearer(device: Any) -> dict[str, str]:
    # RFC 6749 §4.4.2 with the client authenticated by form fields (§2.3.1)
    token = httpx.post(
        f"{device.url}/v4/token",
        data={"grant_type": "client_credentials", "client_id": CLIENT_ID,
              "client_secret": device.token},
    ).json()["access_token"]  # fmt: skip
    return {"Authorization": f"Bearer {token}"}


def test_the_relay_device_refuses_openqasm_2_text() -> None:
    # the profile's program key matters: the device reads OpenQASM 3 only
    with running_device(preset="relay") as device:
        headers = {**_bearer(device), "Idempotency-Key": '"k1"'}
        text = PROGRAM.format(angle=0.5)
        refused = httpx.post(f"{device.url}/v4/jobs", headers=headers,
                             json={"qasm3": text, "shots": 5})  # fmt: skip
        taken = httpx.post(f"{device.url}/v4/jobs", headers=headers,
                           json={"qasm3": openqasm3_text(parse_qasm(text)), "shots": 5})  # fmt: skip
    assert refused.status_code == 400 and "OpenQASM 3" in refused.json()["error"]["message"]
    assert taken.status_code == 202 and taken.headers["location"].startswith("/v4/queues/")


# Every shot of this invented circuit is c[0] = 1, c[1] = 0 (a = 01) and c[2] = 0 (b = 0):
# the count key "01|0"; as an integer whose bit k is c[k], 1 (worked by hand).
ONE_OUTCOME = 'OPENQASM 3.0;\ninclude "stdgates.inc";\nqubit[3] q;\nbit[2] a;\nbit[1] b;\nx q[0];\na = measure q[0:1];\nb[0] = measure q[2];\n'


def test_the_relay_device_writes_one_outcome_in_every_form_over_chained_pages() -> None:
    with running_device(preset="relay", queue_delay=0.05, page_size=2) as device:
        headers = {**_bearer(device), "Idempotency-Key": '"k2"'}
        job = httpx.post(f"{device.url}/v4/jobs", headers=headers,
                         json={"qasm3": ONE_OUTCOME, "shots": 5}).headers["location"]  # fmt: skip
        pages: dict[str, list[Any]] = {}
        links: list[str] = []
        for _ in range(100):  # bounded: the job finishes after its 0.05 s queue delay
            if httpx.get(device.url + job, headers=headers).json()["job"]["phase"] == "finished":
                break
            time.sleep(0.02)
        for form in FORMS:
            url: str | None = f"{device.url}{job}/outcomes?form={form}"
            pages[form] = []
            while url is not None and len(pages[form]) < 10:  # bounded
                answer = httpx.get(url, headers=headers).json()
                pages[form].append(answer["outcomes"])
                links += [answer["next"]] if answer["next"] else []
                # RFC 3986 §5.2: a reference resolved against the page's own URL
                url = str(httpx.URL(url).join(answer["next"])) if answer["next"] else None
    assert pages["hex-counts"] == [{"0x1": 5}] and pages["decimal-counts"] == [{"1": 5}]
    assert pages["bit-counts"] == [{"100": 5}]  # c[0] leftmost
    assert pages["bit-shots"] == [["001", "001"], ["001", "001"], ["001"]]  # c[0] rightmost
    assert pages["integer-shots"] == [[1, 1], [1, 1], [1]]
    # the next pages' URLs: relative, then absolute, for each per-shot form
    assert [link.startswith("http://") for link in links] == [False, True, False, True]
