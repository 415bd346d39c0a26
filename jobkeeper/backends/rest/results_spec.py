"""The ``[results]`` table of a device profile: where the outcome sits in the device's
answer, how it is encoded, and how its pages follow one another (format 2)."""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from jobkeeper.backends.rest.wire import Pointer


class _Model(BaseModel):
    # Unknown keys are errors: a typo in a profile must not be silently ignored.
    model_config = ConfigDict(extra="forbid", frozen=True)


class PagesSpec(_Model):
    """Results over several answers (format 2): the next page's URL at a JSON Pointer
    (``next``, absolute or relative to the page's URL; absent or null on the last page),
    in an RFC 8288 ``Link: <...>; rel="next"`` header (``link = true``), or by page
    number in a query parameter (``number_parameter``, from ``first_number``, until
    ``count`` pages, a JSON Pointer to the number of pages, have been read)."""

    next: Pointer | None = None
    link: bool = False
    number_parameter: str | None = None
    first_number: int = Field(default=1, ge=0)
    count: Pointer | None = None

    @model_validator(mode="after")
    def _check_one_way(self) -> PagesSpec:
        ways = [self.next is not None, self.link, self.number_parameter is not None]
        if sum(ways) != 1:
            raise ValueError("say how to find the next page: next, link or number_parameter")
        if (self.number_parameter is None) != (self.count is None):
            raise ValueError("number_parameter and count go together")
        return self


class ResultsSpec(_Model):
    """Where the outcome sits: in the result answer, or in the status answer when the
    profile has no result request. ``counts`` (an object of outcome → count) or, in
    format 2, ``samples`` (a list, one outcome per shot, aggregated by jobkeeper).

    ``bit_order = "ours"``: count keys as jobkeeper writes them (registers in
    declaration order, the first declared leftmost, joined by ``|``; each register's
    value in binary, its highest index leftmost). Format 2 adds
    ``c0_right`` and ``c0_left`` (which end of an outcome is c[0]) with an ``encoding``:
    ``bitstrings``, ``integers`` (decimal), ``hex`` (``"0x3"``) or, for samples only,
    ``bit_arrays`` ([0, 1, 1]); the width is the circuit's classical bits, and several
    registers are split by the circuit's register layout."""

    counts: Pointer | None = None
    samples: Pointer | None = None
    probabilities: Pointer | None = None
    metadata: Pointer | None = None
    bit_order: Literal["ours", "c0_right", "c0_left"] = "ours"
    encoding: Literal["bitstrings", "integers", "hex", "bit_arrays"] = "bitstrings"
    pages: PagesSpec | None = None

    @model_validator(mode="after")
    def _check_outcome(self) -> ResultsSpec:
        if (self.counts is None) == (self.samples is None):
            raise ValueError("give exactly one of counts and samples")
        if self.bit_order == "ours" and (self.encoding != "bitstrings" or self.samples):
            raise ValueError(
                "bit_order 'ours' reads counts of bit strings only; for other encodings "
                "and samples say which end is c[0]: 'c0_right' or 'c0_left'"
            )
        if self.encoding == "bit_arrays" and self.counts is not None:
            raise ValueError("encoding 'bit_arrays' cannot key counts: JSON keys are text")
        return self

    @property
    def decoded(self) -> bool:
        """Whether outcomes need the circuit's register layout to be read."""
        return self.bit_order != "ours"
