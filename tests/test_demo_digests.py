"""Refactoring guard: the demo's outputs are the same, byte for byte, as the committed digests.

Not a correctness check (the numbers are checked against their sources elsewhere): it proves
that moving or restructuring code left every output unchanged. What is normalised before
hashing, and how to regenerate the digests when numbers change on purpose, is said in
``tests/demo_digests.py`` and DEVELOPERS.md.
"""

from __future__ import annotations

import json

from demo_digests import DIGESTS, digests, run_demo


def test_demo_outputs_match_the_committed_digests(tmp_path):
    expected = json.loads(DIGESTS.read_text(encoding="utf-8"))
    found = digests(run_demo(tmp_path))
    assert sorted(found) == sorted(expected)  # the same files
    changed = [name for name in expected if found[name] != expected[name]]
    assert changed == [], "outputs changed; regenerate on purpose: tests/demo_digests.py --write"
