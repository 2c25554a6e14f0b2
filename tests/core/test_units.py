"""Number lists typed into text parameters."""
def test_parse_numbers():
    import pytest

    from plugin.core.errors import ChannelHabitatError
    from plugin.core.units import parse_numbers

    assert parse_numbers("3000, 4000;5000  6e3") == [3000.0, 4000.0, 5000.0, 6000.0]
    assert parse_numbers("") == [] and parse_numbers(None) == []
    with pytest.raises(ChannelHabitatError, match="'3k' is not a number") as exc:
        parse_numbers("3000, 3k", "SCENARIO_DISCHARGES")
    assert exc.value.parameter == "SCENARIO_DISCHARGES"
