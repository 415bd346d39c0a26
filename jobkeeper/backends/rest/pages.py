"""Results over several answers, and outcomes in a device's own encoding, gathered into
one result.

Pages are followed as the profile says: the next page's URL at a JSON Pointer (absolute
or relative to the page's URL, RFC 3986 §5), an RFC 8288 ``Link`` header with
``rel="next"``, or numbered pages in a query parameter. Every page is fetched (at most
MAX_PAGES, each capped like any answer), every next URL must stay on the device's origin
(its credentials travel with the request), and the outcomes add up to exactly the shots
asked for: a short or long result is an error, never accepted quietly.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Awaitable, Callable
from typing import Any

import httpx

from jobkeeper.backends.rest.decode import (
    BitOrder,
    DecodeError,
    decode_counts,
    decode_samples,
    register_layout,
)
from jobkeeper.backends.rest.handles import JobRef
from jobkeeper.backends.rest.http import Reply
from jobkeeper.backends.rest.profile import DeviceProfile
from jobkeeper.backends.rest.results import mismatch, pick, probabilities_of
from jobkeeper.backends.rest.results_spec import PagesSpec
from jobkeeper.exceptions import PermanentBackendError

#: the most pages read for one result.
MAX_PAGES = 10_000

Fetch = Callable[[str], Awaitable[Reply]]


def _next_target(reply: Reply, spec: PagesSpec, profile: DeviceProfile, number: int) -> str | None:
    if spec.number_parameter is not None:
        assert spec.count is not None
        total = pick(reply.document, spec.count, "result", profile)
        if isinstance(total, bool) or not isinstance(total, int) or total < 0:
            raise mismatch(profile, "result", f"page count {total!r} is not a number")
        if number + 1 >= spec.first_number + total:
            return None
        url = httpx.URL(reply.url)
        return str(url.copy_set_param(spec.number_parameter, str(number + 1)))
    if spec.link:
        link = _links(reply).get("next")
        return link or None
    assert spec.next is not None
    value = pick(reply.document, spec.next, "result", profile, default=None)
    if value is None or value == "":
        return None
    if not isinstance(value, str):
        raise mismatch(profile, "result", f"next page {value!r} is not a URL")
    return value


def _links(reply: Reply) -> dict[str, str]:
    # httpx reads RFC 8288 Link headers; a response is made only to ask it to
    response = httpx.Response(200, headers=reply.headers)
    found: dict[str, str] = {}
    for rel, link in response.links.items():
        for name in str(rel).split():
            found.setdefault(name.lower(), link.get("url", ""))
    return found


def _resolve(target: str, current: str, base: str) -> str:
    url = httpx.URL(current).join(target)
    origin = httpx.URL(base)
    if (url.scheme, url.host, url.port) != (origin.scheme, origin.host, origin.port):
        raise PermanentBackendError(
            f"the next page is on another origin ({url.scheme}://{url.host}); not followed"
        )
    return str(url)


async def gather_outcome(
    first: Reply, profile: DeviceProfile, ref: JobRef, fetch: Fetch, base: str
) -> dict[str, int]:
    """Counts from every page of a result, decoded as the profile says and checked
    against the shots asked for."""
    results = profile.results
    registers = register_layout(ref.registers or ())
    total: Counter[str] = Counter()
    reply, number, seen = first, results.pages.first_number if results.pages else 0, 0
    for _ in range(MAX_PAGES):  # bounded: a device cannot page forever
        try:
            if results.samples is not None:
                values = pick(reply.document, results.samples, "result", profile)
                total.update(decode_samples(values, results.encoding, _order(profile), registers))
            else:
                assert results.counts is not None
                values = pick(reply.document, results.counts, "result", profile)
                page = decode_counts(values, results.encoding, _order(profile), registers)
                total.update(page)
        except DecodeError as exc:
            raise mismatch(profile, "result", str(exc)) from None
        seen = sum(total.values())
        if ref.shots is not None and seen > ref.shots:
            break
        if results.pages is None:
            break
        target = _next_target(reply, results.pages, profile, number)
        if target is None:
            break
        reply, number = await fetch(_resolve(target, reply.url, base)), number + 1
    else:
        raise mismatch(profile, "result", f"more than {MAX_PAGES} pages")
    if ref.shots is not None and seen != ref.shots:
        raise mismatch(
            profile,
            "result",
            f"the outcomes add up to {seen} shots; {ref.shots} were asked for"
            + (" (a short result is not accepted)" if seen < ref.shots else ""),
        )
    return dict(total)


def _order(profile: DeviceProfile) -> BitOrder:
    # samples and other encodings never use "ours" (the profile refuses it); read as
    # c[0] rightmost, the registers laid out by the one count-key function
    order = profile.results.bit_order
    return "c0_right" if order == "ours" else order


async def read_outcome(
    first: Reply, profile: DeviceProfile, ref: JobRef, fetch: Fetch, base: str
) -> tuple[dict[str, int] | None, dict[str, float] | None, Any]:
    """(counts, probabilities, device metadata) of a format 2 result: exact
    probabilities when the device gave them and no outcomes, else counts from every page."""
    results = profile.results
    document = first.document
    metadata = None
    if results.metadata is not None:
        metadata = pick(document, results.metadata, "result", profile, None)
    outcome = results.samples or results.counts or ""
    if results.probabilities is not None:
        exact = pick(document, results.probabilities, "result", profile, None)
        if exact is not None and pick(document, outcome, "result", profile, None) is None:
            return None, probabilities_of(exact, profile), metadata
    return await gather_outcome(first, profile, ref, fetch, base), None, metadata
