"""A run rebuilt from its records (index lost) chooses each point's attempt by the index's own
rule: the newest attempt without flags, else the newest; never an interrupted one."""

from __future__ import annotations

from app.storage.reader import choose_by_rule


def _att(point, seq, flags=()):
    return {"point_index": point, "seq": seq, "flags": tuple(flags), "analysis": {}, "decision": ""}


def test_the_rebuilt_choice_follows_the_acceptance_rule():
    atts = [_att(0, 1), _att(0, 2, ["pair-spread"]),                 # newer but flagged: the first stays
            _att(1, 1, ["pair-spread"]), _att(1, 2, ["drift-light"]),  # all flagged: the newest
            _att(2, 1), _att(2, 2, ["interrupted"])]                  # interrupted: never
    choose_by_rule(atts)
    chosen = {(a["point_index"], a["seq"]) for a in atts if a["decision"] == "accepted"}
    assert chosen == {(0, 1), (1, 2), (2, 1)}
