"""Circuits: the OpenQASM 2.0 and 3 readers, templates with inputs, the circuit IR,
canonical form and hash, metrics."""

from jobkeeper.circuit.canonical import canonical_text, circuit_hash
from jobkeeper.circuit.ir import Circuit, Condition, Operation, Register
from jobkeeper.circuit.metrics import CircuitMetrics, metrics
from jobkeeper.circuit.parser import load_qasm, load_template, parse_qasm, parse_template
from jobkeeper.circuit.qasm3 import Template
from jobkeeper.circuit.stdgates import STANDARD_GATES, expand_standard

__all__ = [
    "STANDARD_GATES",
    "Circuit",
    "CircuitMetrics",
    "Condition",
    "Operation",
    "Register",
    "Template",
    "canonical_text",
    "circuit_hash",
    "expand_standard",
    "load_qasm",
    "load_template",
    "metrics",
    "parse_qasm",
    "parse_template",
]
