"""The option parsing that ``calibrate`` and ``fault`` share (tui/commands/common.py)."""

from __future__ import annotations

import pytest

from meas.errors import BenchwalkError


def test_shared_option_parsing_of_calibrate_and_fault():
    """``--steps`` (calibrate) and ``--currents``/``--switch`` (fault) read lists and pairs
    through one helper (tui/commands/common.py)."""
    from tui.commands.calibrate import _steps
    from tui.commands.common import comma_list, name_value_pairs
    from tui.commands.fault import _names

    assert comma_list(" a, b ,,c ") == ("a", "b", "c")
    assert _steps("load-bank-2, reactor-in") == ("load-bank-2", "reactor-in")
    assert _steps("passing") == "passing"
    assert _names("IA,IB, IC") == ["IA", "IB", "IC"] and _names(None) is None
    assert name_value_pairs(["TIE=closed", " RX = open"], "--switch") == {
        "TIE": "closed",
        "RX": "open",
    }
    with pytest.raises(BenchwalkError, match="--switch 'TIE': write NAME=VALUE"):
        name_value_pairs(["TIE"], "--switch")
    with pytest.raises(BenchwalkError, match="--steps needs passing, all"):
        _steps(" , ")
