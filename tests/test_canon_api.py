"""The canonicaliser's switches as the code reads them match the switches a rules file may set."""

from linkfold.canon import SWITCHES
from linkfold.canon._hostplan import _Switches


def test_switch_annotations_match_the_rules_switches():
    # The annotations exist for the type checker; a switch added to SWITCHES must be annotated too.
    assert tuple(_Switches.__annotations__) == SWITCHES
