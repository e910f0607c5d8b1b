"""The model file printed in DESIGN.md, kept verbatim in tests/data, loads unchanged."""

from pathlib import Path

from crn.io.models import load_model
from crn.io.text import network_to_text

EXAMPLE = Path(__file__).parent / "data" / "design_example.toml"


def test_design_example_translates_without_changes():
    model = load_model(EXAMPLE, {"n": 5000})
    net = model.network
    # derived from DESIGN.md's translation rule: ordered pairs (X,Y) and (Y,X) give two
    # distinct reactions; (U,U) -> (X,Y) with p = 0.5 gives 2 U -> X + Y at rate 0.5
    assert net.volume == 4999
    assert dict(zip(net.species, net.initial.tolist(), strict=True)) == {
        "X": 2505, "Y": 2495, "U": 0}
    lines = [line for line in network_to_text(net).splitlines() if not line.startswith("#")]
    assert [" ".join(line.split()) for line in lines] == [
        "X + Y -> X + U rate 1",
        "X + Y -> Y + U rate 1",
        "X + U -> 2 X rate 1",
        "Y + U -> 2 Y rate 1",
        "2 U -> X + Y rate 0.5",
    ]
    assert net.majority == ("X", "Y")
    assert net.output == {"X": "X", "Y": "Y"}
