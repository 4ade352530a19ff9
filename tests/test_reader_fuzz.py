"""Bad input never ends in a traceback: any text either reads as a network or raises InputError.

Property test (hypothesis) over branch tables and edge lists built from a mix of valid and broken
pieces: stray quotes, wrong field counts, odd kinds, non-numbers, empty fields, blank lines.
"""

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from ohmgraph.engine import Network
from ohmgraph.io.errors import InputError
from ohmgraph.io.reader import read_network

FIELD = st.one_of(
    st.sampled_from(["0", "a", "b", "n1", "R", "V", "I", "r", "x", "1", "2.5", "-3", "1e3", "nan",
                     "inf", "", " ", '"', '"a,b"', "1k", "#", "\t", "é", "0.0"]),
    st.text(alphabet=st.characters(codec="utf-8", exclude_characters="\r\n\x00"), max_size=6),
)


def _rows(separator):
    row = st.lists(FIELD, min_size=0, max_size=7).map(separator.join)
    return st.lists(row, min_size=0, max_size=12)


def _read(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    try:
        net = read_network(path)
    except InputError as error:
        assert str(error)                     # a message, never empty
        return None
    assert isinstance(net, Network)
    return net


SETTINGS = settings(max_examples=150, deadline=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture])


@SETTINGS
@given(header=st.sampled_from(["name,kind,from,to,value", "from,to,value", "kind,from,to,value",
                               "from,to", "name,kind,from,to,value,extra", ""]),
       rows=_rows(","))
def test_any_csv_reads_or_raises_input_error(tmp_path, header, rows):
    _read(tmp_path, "net.csv", "\n".join([header, *rows]) + "\n")


@SETTINGS
@given(rows=_rows(" "))
def test_any_edge_list_reads_or_raises_input_error(tmp_path, rows):
    net = _read(tmp_path, "net.txt", "\n".join(["0 a 1", *rows]) + "\n")
    if net is not None:
        assert net.n_branches >= 1
