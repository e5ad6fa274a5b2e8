"""The numpy-built binary arrays of the PostgreSQL store
(scheduling/pgarrays.py).  The reference is psycopg's own binary dump of
the same values as a list (the form the store sent before), byte for byte;
on PostgreSQL also the server's own reading of them."""

import numpy as np
import psycopg
import pytest
from django.db import connection
from psycopg.adapt import PyFormat, Transformer

from scheduling import pgarrays

CASES = [
    ("float8", [1.5, -0.0, 1e300, 3.25, 5e-324]),
    ("int8", [1, 2**40, -7, 0]),
    ("int4", [0, -5, 7, 2**31 - 1, -2**31]),
    ("bool", [True, False, True]),
]


@pytest.mark.parametrize("element, values", CASES)
def test_the_bytes_are_psycopgs_own_for_the_same_list(element, values):
    numpy_type = {"float8": float, "int8": np.int64, "int4": np.int64, "bool": bool}[element]
    # psycopg picks the element type from the values; int4 and int8 lists both dump as the smallest fitting
    # type, so the list is given as the type the column casts to.
    sample = {"int4": psycopg.types.numeric.Int4, "int8": psycopg.types.numeric.Int8}.get(element)
    as_list = [sample(v) for v in values] if sample else list(values)
    dumper = Transformer().get_dumper(as_list, PyFormat.BINARY)
    assert pgarrays.binary_array(np.array(values, dtype=numpy_type), element).data == dumper.dump(as_list)


def test_nan_is_kept_and_an_empty_array_is_an_empty_array():
    back = np.frombuffer(pgarrays.binary_array(np.array([np.nan]), "float8").data[-8:], dtype=">f8")
    assert np.isnan(back[0])
    assert len(pgarrays.binary_array(np.zeros(0), "float8").data) == 12


def test_a_two_dimensional_array_is_refused():
    with pytest.raises(ValueError, match="one-dimensional"):
        pgarrays.binary_array(np.zeros((2, 2)), "float8")


@pytest.mark.django_db
def test_the_server_reads_them_as_the_values():
    if connection.vendor != "postgresql":
        pytest.skip("PostgreSQL's own reading; the bytes are checked against psycopg's above")
    connection.ensure_connection()
    cursor = psycopg.Cursor(connection.connection)
    pgarrays.register(cursor.adapters)
    casts = {"float8": "float8[]", "int8": "bigint[]", "int4": "integer[]", "bool": "bool[]"}
    for element, values in CASES:
        sent = pgarrays.binary_array(np.array(values), element)
        assert cursor.execute(f"SELECT %b::{casts[element]}", [sent]).fetchone()[0] == values
    with pytest.raises(psycopg.errors.DatatypeMismatch):  # the header's element type is checked
        cursor.execute("SELECT %b::integer[]", [pgarrays.binary_array(np.array([1.5]), "float8")])
    cursor.close()
