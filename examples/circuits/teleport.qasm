// Teleporting ry(1.0)|0> from q[0] to q[2] with classically controlled corrections.
// (Invented example for jobkeeper's demo.) Bit r[0], the last part of each count key
// (m0|m1|r), is the teleported qubit: P(1) = sin^2(0.5) ≈ 0.2298.
OPENQASM 2.0;
include "qelib1.inc";
qreg q[3];
creg m0[1];
creg m1[1];
creg r[1];
ry(1.0) q[0];
h q[1];
cx q[1], q[2];
cx q[0], q[1];
h q[0];
measure q[0] -> m0[0];
measure q[1] -> m1[0];
if(m1==1) x q[2];
if(m0==1) z q[2];
measure q[2] -> r[0];
