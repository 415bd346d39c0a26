"""Gate calls with modifiers (``ctrl @``, ``negctrl @``, ``inv @``, ``pow(k) @``) down to
the IR's standard gates.

Meanings are the specification's (../shared/corpus/qasm3/spec/gates.rst, "Quantum gate
modifiers"; standard_library.rst): ``inv`` inverts, ``ctrl``/``negctrl`` add controls
(the first operands), ``pow(k)`` repeats for integer k and takes the principal root for
real k; modifiers compose in any order, the leftmost applying last. A call resolves in
this order:

1. a standard-library gate with no modifier left is one IR operation of the same name
   (``phase``, ``cphase`` and ``CX`` become ``p``, ``cp`` and ``cx``, the aliases the
   library defines them as), so a 3 program and its 2.0 twin give the same operations;
2. an inverse or a controlled form that is itself a named gate (``inv @ s`` is ``sdg``,
   ``ctrl @ x`` is ``cx``, ``ctrl(2) @ x`` is ``ccx``...) becomes that gate;
3. otherwise the gate's definition is expanded with the modifiers applied to each of its
   statements, down to ``U`` and ``gphase``: an uncontrolled ``U`` is ``u3`` (global
   phase dropped), one control makes ``cu`` (which carries the phase), ``gphase`` with
   one or two controls is ``p``/``cp`` on the controls, and more controls use the
   decomposition of Barenco et al., "Elementary gates for quantum computation",
   Phys. Rev. A 52, 3457 (1995), lemma 7.5. Real powers take the gate's 2×2 matrix.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import NoReturn

from jobkeeper.circuit.lexer import Token
from jobkeeper.circuit.qasm3 import nodes as n
from jobkeeper.circuit.qasm3.sinks import MCX, NUMERIC_COST, Controls, MatrixSink, Sink
from jobkeeper.circuit.qasm3.unitary import angles_of, principal_power

MAX_CALL_DEPTH = 64
#: Work units per gate-body statement expanded (see interpret.STEP_COST).
STEP_COST = 8
MAX_REPEAT = 1 << 20

#: Standard-library names whose IR name differs (aliases the library defines).
IR_NAME = {"CX": "cx", "phase": "p", "cphase": "cp"}
_SELF_INVERSE = frozenset(
    {"x", "y", "z", "h", "cx", "CX", "cy", "cz", "ch", "swap", "ccx", "cswap", "id"}
)
_SWAPPED = {"s": "sdg", "sdg": "s", "t": "tdg", "tdg": "t"}
_NEGATED = frozenset({"p", "phase", "u1", "rx", "ry", "rz", "cp", "cphase", "crx", "cry", "crz"})
#: (library gate, number of added controls) → IR gate and the parameters it takes.
_CONTROLLED: dict[tuple[str, int], tuple[str, Callable[[tuple[float, ...]], tuple[float, ...]]]] = {
    ("x", 1): ("cx", lambda p: ()),
    ("y", 1): ("cy", lambda p: ()),
    ("z", 1): ("cz", lambda p: ()),
    ("h", 1): ("ch", lambda p: ()),
    ("p", 1): ("cp", lambda p: p),
    ("phase", 1): ("cp", lambda p: p),
    ("u1", 1): ("cp", lambda p: p),
    ("rx", 1): ("crx", lambda p: p),
    ("ry", 1): ("cry", lambda p: p),
    ("rz", 1): ("crz", lambda p: p),
    ("sx", 1): ("csx", lambda p: ()),
    ("swap", 1): ("cswap", lambda p: ()),
    ("s", 1): ("cp", lambda p: (math.pi / 2,)),
    ("sdg", 1): ("cp", lambda p: (-math.pi / 2,)),
    ("t", 1): ("cp", lambda p: (math.pi / 4,)),
    ("tdg", 1): ("cp", lambda p: (-math.pi / 4,)),
}
_X_FAMILY = {"x": 0, "cx": 1, "CX": 1, "ccx": 2}


def _no_params(params: tuple[float, ...]) -> tuple[float, ...]:
    return ()


def _inverse(name: str, params: tuple[float, ...]) -> tuple[str, tuple[float, ...]] | None:
    if name in _SELF_INVERSE:
        return name, params
    if name in _SWAPPED:
        return _SWAPPED[name], params
    if name in _NEGATED:
        return name, (-params[0],)
    if name == "u3":
        theta, phi, lam = params
        return "u3", (-theta, -lam, -phi)
    if name == "u2":
        phi, lam = params
        return "u3", (-math.pi / 2, -lam, -phi)
    if name == "cu":
        theta, phi, lam, gamma = params
        return "cu", (-theta, -lam, -phi, -gamma)
    return None


#: A gate: the built-ins are the strings "U" and "gphase".
Gate = n.GateDef | str


@dataclass(frozen=True, slots=True)
class Call:
    """One gate application as its modifiers have shaped it so far: the gate, its
    parameters, its target qubits, the controls added (qubit, positive?), whether it is
    inverted, and the token to blame for an error."""

    gate: Gate
    params: tuple[float, ...]
    qubits: tuple[int, ...]
    ctrls: Controls
    inv: bool
    at: Token


Evaluate = Callable[[n.Expr, dict[str, float]], float]


class Expander:
    """Resolves one gate call. ``lookup`` finds a gate by its name token (or raises);
    ``evaluate`` computes a parameter expression in a gate body's scope; ``standard``
    names the gates that came from the standard library."""

    def __init__(
        self,
        lookup: Callable[[Token], Gate],
        evaluate: Evaluate,
        standard: Callable[[n.GateDef], bool],
        fail: Callable[[str, Token], NoReturn],
        charge: Callable[[int], None],
    ) -> None:
        self.lookup = lookup
        self.evaluate = evaluate
        self.standard = standard
        self.fail = fail
        self.charge = charge
        self.depth = 0

    def check(
        self,
        stmt: n.GateCall,
        gate: Gate,
        mods: list[tuple[str, float, Token]],
        n_params: int,
        n_operands: int,
    ) -> None:
        """Arity of a call: parameters, and operands = controls + the gate's qubits."""
        controls = 0
        for kind, k, tok in mods:
            if kind in ("ctrl", "negctrl"):
                if k != round(k) or k < 1:
                    self.fail(f"{kind}(k) needs a positive integer k, found {k!r}", tok)
                controls += int(k)
        if gate == "U":
            want_params, want_qubits = 3, 1
        elif gate == "gphase":
            want_params, want_qubits = 1, 0
        else:
            assert isinstance(gate, n.GateDef)
            want_params, want_qubits = len(gate.params), len(gate.qubits)
        name = stmt.name
        if n_params != want_params:
            self.fail(
                f"gate '{name.text}' takes {want_params} parameter(s), {n_params} given", name
            )
        if gate == "gphase" and not controls:
            return  # gphase may name qubits; the phase is global all the same
        if n_operands != controls + want_qubits:
            self.fail(
                f"gate '{name.text}' with {controls} control(s) takes "
                f"{controls + want_qubits} qubit(s), {n_operands} given",
                name,
            )

    def apply(self, sink: Sink, mods: list[tuple[str, float, Token]], call: Call) -> None:
        """Apply ``call`` with its modifiers ``mods`` (outermost first) to ``sink``."""
        self.depth += 1
        if self.depth > MAX_CALL_DEPTH:
            self.fail(f"gate calls nested more than {MAX_CALL_DEPTH} deep", call.at)
        try:
            self._modified(sink, mods, call)
        finally:
            self.depth -= 1

    def _modified(self, sink: Sink, mods: list[tuple[str, float, Token]], call: Call) -> None:
        if not mods:
            self.base(sink, call)
            return
        (kind, k, tok), rest = mods[0], mods[1:]
        if kind in ("ctrl", "negctrl"):
            count = int(k)
            added = tuple((q, kind == "ctrl") for q in call.qubits[:count])
            self.apply(
                sink, rest, replace(call, qubits=call.qubits[count:], ctrls=call.ctrls + added)
            )
        elif kind == "inv":
            self.apply(sink, rest, replace(call, inv=not call.inv))
        elif k == round(k) and abs(k) <= MAX_REPEAT:
            times = int(abs(k))
            self.charge(times)
            for _ in range(times):
                self.apply(sink, rest, replace(call, inv=call.inv != (k < 0)))
        else:
            if len(call.qubits) != 1:
                self.fail(
                    "pow with a non-integer exponent is supported on single-qubit gates only", tok
                )
            self.charge(NUMERIC_COST)
            inner = MatrixSink(lambda message: self.fail(message, tok))
            self.apply(inner, rest, replace(call, qubits=(0,), ctrls=(), inv=False))
            matrix = principal_power(inner.matrix, k)
            if call.inv:
                matrix = matrix.conj().T
            sink.u(angles_of(matrix), call.qubits[0], call.ctrls)

    def base(self, sink: Sink, call: Call) -> None:
        gate, params, inv = call.gate, call.params, call.inv
        if gate == "gphase":
            sink.gphase(-params[0] if inv else params[0], call.ctrls)
            return
        if gate == "U":
            theta, phi, lam = params
            if inv:
                theta, phi, lam = -theta, -lam, -phi
            sink.u((theta, phi, lam, theta / 2), call.qubits[0], call.ctrls)
            return
        assert isinstance(gate, n.GateDef)
        named = self.standard(gate) and not sink.matrix_only
        if named and self._named(sink, gate.name.text, call):
            return
        self.expand(sink, gate, call)

    def _named(self, sink: Sink, name: str, call: Call) -> bool:
        params, qubits, ctrls = call.params, call.qubits, call.ctrls
        if call.inv:
            if not ctrls and name == "sx":
                sink.named("sxdg", (), qubits)
                return True
            inverse = _inverse(name, params)
            if inverse is None:
                return False
            name, params = inverse
        if not ctrls:
            sink.named(IR_NAME.get(name, name), params, qubits)
            return True
        controls = tuple(q for q, _ in ctrls)
        mapped: tuple[str, Callable[[tuple[float, ...]], tuple[float, ...]]]
        if name in _X_FAMILY and len(ctrls) + _X_FAMILY[name] in MCX:
            target_name = MCX[len(ctrls) + _X_FAMILY[name]]
            mapped = (target_name, _no_params)
        elif (name, len(ctrls)) in _CONTROLLED:
            mapped = _CONTROLLED[(name, len(ctrls))]
        else:
            return False
        negatives = [(q,) for q, positive in ctrls if not positive]
        for q in negatives:
            sink.named("x", (), q)
        sink.named(mapped[0], mapped[1](params), controls + qubits)
        for q in negatives:
            sink.named("x", (), q)
        return True

    def expand(self, sink: Sink, gate: n.GateDef, call: Call) -> None:
        scope = dict(zip(gate.params, call.params, strict=True))
        where = dict(zip(gate.qubits, call.qubits, strict=True))
        body = reversed(gate.body) if call.inv else iter(gate.body)
        for stmt in body:
            self.charge(STEP_COST)
            if isinstance(stmt, n.Barrier):
                mapped = tuple(where[o.tok.text] for o in stmt.operands) or call.qubits
                if not call.ctrls:
                    sink.barrier(mapped)
                continue
            assert isinstance(stmt, n.GateCall)
            call_mods = [
                (m.kind, 1.0 if m.arg is None else self.evaluate(m.arg, scope), m.tok)
                for m in stmt.modifiers
            ]
            values = tuple(self.evaluate(arg, scope) for arg in stmt.args)
            targets = tuple(where[o.tok.text] for o in stmt.operands)
            target = self.lookup(stmt.name)
            self.check(stmt, target, call_mods, len(values), len(targets))
            if len(set(targets)) != len(targets):
                self.fail(
                    f"the same qubit appears twice in a call of '{stmt.name.text}'", stmt.name
                )
            if target == "gphase" and not any(k in ("ctrl", "negctrl") for k, _, _ in call_mods):
                targets = ()
            self.apply(
                sink, call_mods, Call(target, values, targets, call.ctrls, call.inv, stmt.tok)
            )
