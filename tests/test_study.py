"""The study model: validation messages, exclusions, content digest, sign-off states, lock."""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from studykit.errors import SpecError, StudyFileError, StudyInputError
from studykit.study import (
    Characteristic,
    Criteria,
    Decision,
    SignOff,
    Study,
)

DATA = b"subgroup,bore [mm],runout [mm]\n1,12.001,0.010\n2,11.999,0.012\n"


def make_study(**kw) -> Study:
    fields = dict(
        title="Pilot lot study",
        part="BW-2207",
        supplier="Example supplier",
        data=DATA,
        data_filename="pilot.csv",
        characteristics=[
            Characteristic("bore", unit="mm", lsl=11.97, usl=12.03, target=12.0),
            Characteristic("runout", unit="mm", usl=0.05),
        ],
        criteria={"bore": Criteria(index="ppk", threshold=1.67)},
    )
    fields.update(kw)
    return Study(**fields)


# -- Characteristic -----------------------------------------------------------------------------


def test_limits_out_of_order_names_both_values():
    with pytest.raises(SpecError, match=r"`usl` \(9\.5\) must be greater than `lsl` \(10\)"):
        Characteristic("bore", lsl=10.0, usl=9.5)


def test_equal_limits_refused():
    with pytest.raises(SpecError, match=r"`usl` \(10\) must be greater than `lsl` \(10\)"):
        Characteristic("bore", lsl=10, usl=10)


def test_target_outside_limits_names_values():
    with pytest.raises(
        SpecError, match=r"`target` \(12\.5\) must lie within .*lsl 11\.97, usl 12\.03"
    ):
        Characteristic("bore", lsl=11.97, usl=12.03, target=12.5)
    with pytest.raises(SpecError, match=r"`target` \(-1\) must lie within .*lsl 0, usl none"):
        Characteristic("force", lsl=0, target=-1)


def test_at_least_one_limit_unless_attribute():
    with pytest.raises(SpecError, match="needs at least one specification limit"):
        Characteristic("bore")
    assert Characteristic("defectives", chart="p").is_attribute


def test_one_sided_specs_allowed():
    upper = Characteristic("runout", usl=0.05)
    lower = Characteristic("pull_off", lsl=180)
    assert not upper.two_sided and upper.tolerance is None
    assert lower.lsl == 180.0 and isinstance(lower.lsl, float)


def test_limit_text_and_bad_values():
    assert Characteristic("x", lsl="1.5", usl=" 2 ").usl == 2.0
    with pytest.raises(SpecError, match=r"`lsl` \('1,5'\) is not a number"):
        Characteristic("x", lsl="1,5", usl=2)
    with pytest.raises(SpecError, match=r"`usl` \(nan\) must be a finite number"):
        Characteristic("x", usl=float("nan"))
    with pytest.raises(SpecError, match=r"`usl` \(True\) must be a number"):
        Characteristic("x", usl=True)
    with pytest.raises(SpecError, match=r"`chart` \('pareto'\) must be one of"):
        Characteristic("x", usl=1, chart="pareto")
    with pytest.raises(SpecError, match=r"`subgroup_size` \(0\) must be a whole number"):
        Characteristic("x", usl=1, subgroup_size=0)
    with pytest.raises(SpecError, match="`name` must not be empty"):
        Characteristic(" ", usl=1)


def test_characteristic_dict_round_trip():
    c = Characteristic(
        "bore",
        unit="mm",
        lsl=1,
        usl=2,
        target=1.5,
        safety_critical=True,
        chart="xbar_r",
        subgroup_size=5,
        model="normal",
        description="drawing 4",
    )
    assert Characteristic.from_dict(json.loads(json.dumps(c.to_dict()))) == c
    with pytest.raises(SpecError, match=r"unknown specification field\(s\) \['colour'\]"):
        Characteristic.from_dict({"name": "x", "usl": 1, "colour": "red"})


# -- Criteria -------------------------------------------------------------------------------------


def test_criteria_defaults_and_checks():
    # defaults: Ppk >= 1.67 on the lower bound, 95 % (common practice, no source)
    c = Criteria()
    assert (c.index, c.threshold, c.basis, c.confidence) == ("ppk", 1.67, "lower_bound", 0.95)
    assert Criteria(index="CPK", threshold=1.33, basis="estimate").describe() == "Cpk >= 1.33"
    with pytest.raises(SpecError, match=r"`index` \('cpx'\) must be one of cp, cpk, pp, ppk, cpm"):
        Criteria(index="cpx")
    with pytest.raises(SpecError, match=r"`threshold` \(0\) must be a positive number"):
        Criteria(threshold=0)
    with pytest.raises(
        SpecError, match=r"`basis` \('median'\) must be one of lower_bound, estimate"
    ):
        Criteria(basis="median")
    with pytest.raises(SpecError, match=r"`confidence` \(95\) must lie between 0 and 1"):
        Criteria(confidence=95)


def test_criteria_must_fit_the_spec():
    with pytest.raises(SpecError, match="'cp' needs both limits.*use 'cpk'"):
        make_study(criteria={"runout": Criteria(index="cp")})
    with pytest.raises(SpecError, match="'cpm' needs a `target`"):
        make_study(criteria={"runout": Criteria(index="cpm")})
    with pytest.raises(SpecError, match="criteria given for 'flatness', which is not a"):
        make_study(criteria={"flatness": Criteria()})
    assert make_study().criteria_for("runout") == Criteria()


# -- Decision -------------------------------------------------------------------------------------


def test_person_exclusion_needs_reason_and_name():
    with pytest.raises(StudyInputError, match="made by a person needs a non-empty `reason`"):
        Decision("bore", "exclude", subgroup=3, reason="  ", who="A. Ruiz")
    with pytest.raises(StudyInputError, match="needs `who`"):
        Decision("bore", "exclude", subgroup=3, reason="tool change")
    with pytest.raises(StudyInputError, match="needs the `subgroup`"):
        Decision("bore", "exclude", reason="tool change", who="A. Ruiz")


def test_automatic_decision_marked_and_attributed():
    d = Decision("bore", "exclude", subgroup=7.0, automatic=True, payload={"rule": "beyond limits"})
    assert d.automatic and d.who == "studykit" and d.subgroup == "7"
    with pytest.raises(TypeError):
        d.payload["rule"] = "changed"  # read-only payload


def test_decision_payload_must_be_json():
    with pytest.raises(StudyInputError, match="`payload` must hold only JSON values"):
        Decision("bore", "note", who="A", payload={"x": object()})
    with pytest.raises(StudyInputError, match="`payload` must hold only JSON values"):
        Decision("bore", "note", who="A", payload={"x": float("inf")})


def test_signoff_checks():
    with pytest.raises(StudyInputError, match=r"`decision` \('ok'\) must be one of approve"):
        SignOff("M", "approved", "ok", digest="0" * 64)
    with pytest.raises(StudyInputError, match="`digest`.*64 hex digits"):
        SignOff("M", "approved", "approve", digest="abc")


# -- Study ----------------------------------------------------------------------------------------


def test_latest_exclude_or_restore_wins_and_nothing_mutates():
    s0 = make_study()
    s1 = s0.exclude("bore", 2, reason="setup part", who="A. Ruiz")
    s2 = s1.exclude("bore", 5, reason="gauge dropped", who="A. Ruiz")
    s3 = s2.restore("bore", 2, reason="setup was fine after all", who="B. Chen")
    s4 = s3.exclude("bore", 2, reason="setup part, confirmed", who="B. Chen")
    assert s0.excluded_subgroups("bore") == {}
    assert sorted(s3.excluded_subgroups("bore")) == ["5"]
    ex = s4.excluded_subgroups("bore")
    assert sorted(ex) == ["2", "5"] and ex["2"].reason == "setup part, confirmed"
    assert s4.excluded_subgroups("runout") == {}
    assert len(s0.decisions) == 0 and len(s4.decisions) == 4
    with pytest.raises(StudyInputError, match="no characteristic 'flatness'"):
        s0.excluded_subgroups("flatness")


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.booleans(), st.integers(1, 6)), max_size=25))
def test_exclusions_match_a_simple_model(ops):
    study = make_study()
    model: dict[str, str] = {}
    for k, (is_exclude, sub) in enumerate(ops):
        reason = f"reason {k}"
        if is_exclude:
            study = study.exclude("bore", sub, reason=reason, who="A")
            model[str(sub)] = reason
        else:
            study = study.restore("bore", sub, reason=reason, who="A")
            model.pop(str(sub), None)
    got = {k: d.reason for k, d in study.excluded_subgroups("bore").items()}
    assert got == model


def test_digest_is_sha256_of_the_canonical_content():
    s = make_study()
    # definition: SHA-256 (hashlib, FIPS 180-4) of sorted-key compact JSON of content_dict()
    text = json.dumps(s.content_dict(), sort_keys=True, separators=(",", ":"))
    assert s.content_digest() == hashlib.sha256(text.encode()).hexdigest()
    assert s.content_dict()["data_sha256"] == hashlib.sha256(DATA).hexdigest()


def test_digest_stable_across_processes(repo_root):
    code = (
        "import sys; sys.path.insert(0, 'tests'); import test_study as t; "
        "s = t.make_study().exclude('bore', 2, reason='r', who='A', when='2026-01-01T00:00:00Z'); "
        "print(s.content_digest())"
    )
    here = make_study().exclude("bore", 2, reason="r", who="A").content_digest()
    for seed in ("1", "2"):
        env = dict(os.environ, PYTHONHASHSEED=seed)
        out = subprocess.run(
            [sys.executable, "-c", code],
            cwd=repo_root,
            env=env,
            capture_output=True,
            text=True,
            check=True,
        ).stdout.strip()
        assert out == here


def test_digest_follows_content_not_commentary():
    s = make_study()
    d0 = s.content_digest()
    assert make_study().content_digest() == d0
    assert s.with_comment("looks fine", who="B").content_digest() == d0
    assert s.with_decision(Decision(None, "note", who="B", reason="")).content_digest() == d0
    assert s.sign("B", role="prepared", decision="approve").content_digest() == d0
    changed = [
        make_study(data=DATA + b"3,12.000,0.011\n"),
        s.exclude("bore", 1, reason="setup", who="A"),
        s.with_spec("bore", usl=12.04, who="A", reason="drawing rev C"),
        s.with_criteria("bore", Criteria(index="cpk", threshold=1.33), who="A", reason="PPAP"),
        s.with_decision(
            Decision(
                "runout", "set_model", who="A", reason="skewed", payload={"model": "lognormal"}
            )
        ),
    ]
    digests = {c.content_digest() for c in changed}
    assert d0 not in digests and len(digests) == len(changed)


def test_spec_change_recorded_and_replayed():
    s = make_study().with_spec("bore", usl=12.04, target=12.01, who="A", reason="drawing rev C")
    assert s.characteristics["bore"].usl == 12.04
    d = s.decisions[-1]
    assert d.action == "set_spec"
    assert d.payload["old"] == {"usl": 12.03, "target": 12.0}
    assert d.payload["changes"] == {"usl": 12.04, "target": 12.01}
    base = make_study()
    again = Study.replay(
        title=base.title,
        part=base.part,
        supplier=base.supplier,
        data=DATA,
        data_filename="pilot.csv",
        characteristics=base.characteristics,
        criteria=base.criteria,
        decisions=s.decisions,
    )
    assert again == s and again.content_digest() == s.content_digest()
    with pytest.raises(SpecError, match=r"`usl` \(11\.9\) must be greater than `lsl` \(11\.97\)"):
        s.with_spec("bore", usl=11.9, target=None, who="A", reason="typo")


def test_signoff_voided_after_later_change():
    s = make_study().sign("P. Novak", role="reviewed", decision="approve")
    assert [st.state for st in s.signoff_state()] == ["valid"]
    assert not s.is_locked  # only the role "approved" locks
    s2 = s.exclude("bore", 1, reason="setup part", who="A")
    (state,) = s2.signoff_state()
    assert state.state == "voided" and "changed after signing" in state.why


def test_approval_locks_and_override_voids_visibly():
    s = make_study().sign("M. Brandt", role="approved", decision="approve", comment="ok")
    assert s.is_locked and s.lock_holder().name == "M. Brandt"
    with pytest.raises(StudyFileError, match=r"approved \(by M\. Brandt .*locked.*override_lock"):
        s.exclude("bore", 1, reason="setup part", who="A")
    with pytest.raises(StudyFileError, match="needs a non-empty reason"):
        s.exclude("bore", 1, reason="setup part", who="A", override_lock=True)
    # commentary is allowed on a locked study
    assert s.with_comment("for the record", who="A").is_locked
    s2 = s.exclude(
        "bore",
        1,
        reason="setup part",
        who="A",
        override_lock=True,
        override_reason="customer asked to remove setup parts",
    )
    void, exclusion = s2.decisions[-2:]
    assert void.action == "void_signoff" and void.payload["signoff"] == 0
    assert exclusion.action == "exclude"
    assert not s2.is_locked and len(s2.signoffs) == 1
    (state,) = s2.signoff_state()
    assert state.state == "voided" and "customer asked" in state.why
    # restoring brings the digest back, yet the voided approval stays voided
    s3 = s2.restore("bore", 1, reason="undo", who="A")
    assert s3.content_digest() == s.content_digest()
    assert s3.signoff_state()[0].state == "voided" and not s3.is_locked


def test_rejection_does_not_lock():
    s = make_study().sign("M. Brandt", role="approved", decision="reject", comment="Cpk low")
    assert not s.is_locked


def test_to_dict_is_json_safe():
    s = (
        make_study()
        .exclude("bore", 1, reason="setup", who="A")
        .sign("M", role="approved", decision="approve")
    )
    d = json.loads(json.dumps(s.to_dict()))
    assert d["locked"] is True
    assert d["characteristics"][0]["excluded_subgroups"] == ["1"]
    assert d["signoffs"][0]["state"] == "valid"
    assert d["data"]["sha256"] == hashlib.sha256(DATA).hexdigest()


def test_tampered_data_sha_refused():
    with pytest.raises(StudyFileError, match="does not match its recorded SHA-256"):
        make_study(data_sha256="0" * 64)


def test_decision_for_unknown_characteristic_refused():
    with pytest.raises(StudyInputError, match="no characteristic 'flatness'"):
        make_study().exclude("flatness", 1, reason="r", who="A")


def test_times_must_be_iso_8601():
    assert Decision("bore", "note", who="A", when="2026-03-02T06:00:00Z").when.startswith("2026")
    with pytest.raises(StudyInputError, match=r"`when` \('yesterday'\) is not an ISO 8601 time"):
        Decision("bore", "note", who="A", when="yesterday")
    with pytest.raises(StudyInputError, match="is not an ISO 8601 time"):
        SignOff("M", "approved", "approve", digest="0" * 64, when="3/2/26")


def test_set_spec_decision_with_unknown_field_refused():
    d = Decision("bore", "set_spec", who="A", reason="r", payload={"changes": {"colour": "red"}})
    with pytest.raises(SpecError, match=r"set_spec: unknown specification field\(s\) \['colour'\]"):
        make_study().with_decision(d)


_limit = st.one_of(st.none(), st.floats(-1e6, 1e6, allow_nan=False))


@settings(max_examples=200, deadline=None)
@given(_limit, _limit, _limit)
def test_spec_accepted_exactly_when_consistent(lsl, usl, target):
    consistent = (
        (lsl is not None or usl is not None)
        and (lsl is None or usl is None or lsl < usl)
        and (target is None or ((lsl is None or target >= lsl) and (usl is None or target <= usl)))
    )
    if consistent:
        c = Characteristic("x", lsl=lsl, usl=usl, target=target)
        assert (c.lsl, c.usl, c.target) == (lsl, usl, target)
    else:
        with pytest.raises(SpecError, match="characteristic 'x': "):
            Characteristic("x", lsl=lsl, usl=usl, target=target)


@settings(max_examples=50, deadline=None)
@given(
    st.lists(st.sampled_from(["bore", "runout"]), min_size=1, max_size=6), st.permutations([0, 1])
)
def test_digest_ignores_characteristic_order(names, order):
    chars = [Characteristic("bore", lsl=11.97, usl=12.03), Characteristic("runout", usl=0.05)]
    a = make_study(characteristics=chars)
    b = make_study(characteristics=[chars[i] for i in order])
    for k, n in enumerate(names):
        a = a.exclude(n, k, reason="r", who="A")
        b = b.exclude(n, k, reason="r", who="A")
    assert a.content_digest() == b.content_digest()
