"""Audit: what turns a finished job into evidence, and evidence into judgements.

- :mod:`~jobkeeper.audit.sealing`: manifest → DSSE envelope → Merkle log entry → signed
  checkpoint, for jobs and for comparisons;
- :mod:`~jobkeeper.audit.verification`: checking a keep's archive or a bundle as a referee
  would, and exporting bundles;
- :mod:`~jobkeeper.audit.judging`: reruns from the signed manifest alone, and comparisons
  of count tables, each archived, signed and logged.

These build on :mod:`jobkeeper.provenance`, which stays pure primitives (no store, no
keep). Users reach all of it through :class:`jobkeeper.Keeper`.
"""
