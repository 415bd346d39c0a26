"""The fast reader of canonical text: the same circuit as the general parser, always.

Its contract is equality with :func:`parse_qasm` on every input (the corpus test checks
every public circuit too); these tests drive it with random programs, with canonical text
edited into something the reader must hand on, and with invalid text, whose error must be
the parser's own.
"""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from jobkeeper.circuit import canonical_read, canonical_text, parse_qasm
from jobkeeper.circuit.canonical_read import read_canonical
from jobkeeper.exceptions import CircuitError
from tests.unit.test_circuit_canonical import SETTINGS, Program, Style, programs, render

HEADER = 'OPENQASM 2.0;\ninclude "qelib1.inc";\n'


def _fast_path_taken(text: str) -> bool:
    try:
        canonical_read._read(text, None)
    except canonical_read._NotCanonical:
        return False
    return True


@SETTINGS
@given(programs())
def test_random_programs_read_as_the_parser_reads_them(p: Program) -> None:
    text = canonical_text(parse_qasm(render(p, Style())))
    assert _fast_path_taken(text)
    assert read_canonical(text, filename="job 1") == parse_qasm(text, filename="job 1")


def test_every_kind_of_line() -> None:
    text = (
        HEADER + "opaque magic(p0,p1) a0,a1;\nopaque tick a0;\nqreg q[3];\ncreg c0[2];\n"
        "creg c1[1];\nu3(1.5707963268,-0.5,1.0e-05) q[2];\ncx q[0],q[2];\n"
        "magic(0.25,3.0) q[1],q[0];\ntick q[2];\nbarrier q[0],q[1],q[2];\n"
        "measure q[0] -> c0[1];\nif(c0==2) x q[1];\nif(c1==1) measure q[1] -> c1[0];\n"
        "if(c0==3) reset q[2];\nreset q[0];\nid q[1];\n"
    )
    assert _fast_path_taken(text)
    assert read_canonical(text) == parse_qasm(text)


@pytest.mark.parametrize(
    "body",
    [
        "qreg q[2];\ncx q[0],q[0];\n",  # a repeated operand: the parser's error
        "qreg q[2];\nh q[2];\n",  # out of range
        "qreg q[2];\ncx q[0];\n",  # wrong arity
        "qreg q[2];\nfoo q[0];\n",  # undefined gate
        "qreg q[2];\ncreg c0[1];\nmeasure q[0] -> c0[1];\n",  # bit out of range
        "qreg q[2];\ncreg c0[1];\nif(c1==0) h q[0];\n",  # no such register
        "qreg q[2];\nh q[0]\n",  # missing semicolon
        "qreg q[0];\n",  # empty register
    ],
)
def test_invalid_text_gets_the_parsers_error(body: str) -> None:
    text = HEADER + body
    assert not _fast_path_taken(text)
    with pytest.raises(CircuitError) as fast:
        read_canonical(text, filename="job 2")
    with pytest.raises(CircuitError) as general:
        parse_qasm(text, filename="job 2")
    assert str(fast.value) == str(general.value)


@pytest.mark.parametrize(
    "text",
    [
        # Valid OpenQASM 2.0 that is not canonical: handed to the general parser.
        HEADER + "qreg r[2];\nh r;\n",
        HEADER + "qreg q[2];\ngate g a { h a; }\ng q[1];\n",
        HEADER + "qreg q[1];\nrz(pi/2) q[0];\n",
        'OPENQASM 2.0;\ninclude "qelib1.inc";\r\nqreg q[1];\r\nh q[0];\r\n',
        HEADER + "qreg q[2];\nbarrier q[1],q[0];\n",
        HEADER + "opaque rzz(p0) a0,a1;\nqreg q[2];\nrzz(0.5) q[0],q[1];\n",
        HEADER + "qreg q[02];\n",
    ],
)
def test_other_valid_text_goes_to_the_parser(text: str) -> None:
    assert not _fast_path_taken(text)
    assert read_canonical(text) == parse_qasm(text)


@SETTINGS
@given(programs(), st.data())
def test_edited_canonical_text_never_differs_from_the_parser(
    p: Program, data: st.DataObject
) -> None:
    # One character of canonical text replaced, inserted or deleted: whatever comes out,
    # circuit or error, is what the parser says.
    text = canonical_text(parse_qasm(render(p, Style())))
    at = data.draw(st.integers(0, len(text)))
    edit = data.draw(st.sampled_from(["replace", "insert", "delete"]))
    char = data.draw(st.sampled_from(list("q[]0123456789,;.-e() \nabcxhmu>")))
    if edit == "replace":
        text = text[:at] + char + text[at + 1 :]
    elif edit == "insert":
        text = text[:at] + char + text[at:]
    else:
        text = text[:at] + text[at + 1 :]
    try:
        expected = parse_qasm(text)
    except CircuitError as exc:
        with pytest.raises(CircuitError) as err:
            read_canonical(text)
        assert str(err.value) == str(exc)
        return
    assert read_canonical(text) == expected
