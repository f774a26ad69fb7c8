"""Error messages name the file, row, id and field, and list every problem at once."""

from calib.errors import InputError, NetworkError, Problem


def test_problem_text_names_where_and_what():
    p = Problem("node 'J9' is not in junctions.csv", file="pipes.csv", row=17, id="P17", field="to")
    assert str(p) == "pipes.csv, row 17, id 'P17', field 'to': node 'J9' is not in junctions.csv"


def test_input_error_lists_all_problems():
    err = NetworkError([Problem("duplicate id", file="junctions.csv", row=3, id="J1"),
                        Problem("C outside 1-200", file="pipes.csv", row=5, id="P4", field="roughness",
                                expected="1 to 200")])
    assert isinstance(err, InputError) and isinstance(err, ValueError)
    text = str(err)
    assert text.startswith("2 problems:")
    assert "junctions.csv, row 3, id 'J1': duplicate id" in text
    assert "(expected 1 to 200)" in text
