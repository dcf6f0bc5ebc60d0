"""Which injected family's alpha_min each bound uses (topology.run.calibration): its own family's
when that was injected, else a borrowed one of the same kind of pairs, the weakest of several,
always said."""

import pytest

from topology.run import calibration as C


def _family(name, kind, geometry, amin):
    return {"key": f"{name}-0", "label": f"injected {name}", "spec": {"family": name}, "kind": kind,
            "geometry": geometry, "alpha_min_deg": amin}


E1 = _family("E1", "back-to-back", "flat", 30.0)
E2 = _family("E2", "general", "flat", 40.0)
E2_NONE = _family("E2", "general", "flat", None)
LENS = _family("lens", "back-to-back", "spherical", 35.0)


def test_own_family_when_injected():
    src = C.source_for([E1, E2], "back-to-back", "flat", own="E1")
    assert (src["calibration"], src["alpha_min_deg"], src["assumption"]) == ("own", 30.0, None)
    src = C.source_for([E1, E2], "general", "flat", own="E2")
    assert (src["calibration"], src["alpha_min_deg"]) == ("own", 40.0)


@pytest.mark.parametrize("families, kind, geometry, own, expect", [
    # homogeneous spherical rows: back-to-back pairs; no spherical family injected -> the flat one
    ([E1, E2], "back-to-back", "spherical", "dodecahedral", 30.0),
    # an inhomogeneous lens space borrows from the family whose pairs are not back to back
    ([E1, E2], "general", "spherical", "lens", 40.0),
    # a spherical injected family of the same kind goes first
    ([E1, E2, LENS], "back-to-back", "spherical", "prism", 35.0),
    # only back-to-back families injected: a general row still borrows one, saying so
    ([E1, LENS], "general", "flat", "E7", 35.0),
    # a source that never reaches the level leaves the row without a bound
    ([E1, E2_NONE], "general", "spherical", "lens", None),
])
def test_borrowed_alpha_min_is_the_weakest_of_its_pool(families, kind, geometry, own, expect):
    src = C.source_for(families, kind, geometry, own=own)
    assert src["calibration"] == "borrowed" and src["alpha_min_deg"] == expect
    assert "assumes" in src["assumption"] and src["injected_family"] in src["assumption"]


def test_any_flat_space_takes_the_weakest_flat_family():
    assert C.any_flat_source([E1, E2, LENS])["alpha_min_deg"] == 40.0
    assert C.any_flat_source([E1, E2_NONE])["alpha_min_deg"] is None
    assert C.any_flat_source([LENS])["alpha_min_deg"] == 35.0  # no flat family: every family
