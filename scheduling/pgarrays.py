"""Numpy arrays in PostgreSQL's binary array format, for the fleet store.

psycopg sends a Python list as an array element by element, in Python
(about half a microsecond an element: some 70 ms of a 10,000-unit store's
nine numeric columns).  A one-dimensional array of fixed-width numbers
without NULLs has a fixed layout (the server's ``array_send``/``array_recv``:
a header of dimensions, flags and element type, then per element its length
and its big-endian value), which numpy writes in one step.  The statement
casts each parameter to its array type (``%b::float8[]``); the server checks
the element type written in the header against it.

No Django here: ``services._store`` registers the dumper on its own cursor.
"""

import struct

import numpy as np
from psycopg.adapt import Dumper
from psycopg.pq import Format

#: Element types: name -> (type oid in pg_type, the big-endian numpy type).
ELEMENTS = {
    "int8": (20, ">i8"),
    "int4": (23, ">i4"),
    "float8": (701, ">f8"),
    "bool": (16, "u1"),
}
_HEAD = struct.Struct(">iiIii")  # dimensions, has-NULLs flag, element oid, length, lower bound
_EMPTY = struct.Struct(">iiI")


class BinaryArray:
    """An array ready to send: its bytes in the binary array format."""

    __slots__ = ("data",)

    def __init__(self, data):
        self.data = data


def binary_array(values, element):
    """``values`` (one-dimensional, no NULLs) as a BinaryArray of
    ``element`` (a key of ELEMENTS).  Floats keep NaN as NaN."""
    oid, dtype = ELEMENTS[element]
    values = np.asarray(values)
    if values.ndim != 1:
        raise ValueError(f"an array parameter must be one-dimensional, not of shape {values.shape}")
    n = values.size
    if n == 0:
        return BinaryArray(_EMPTY.pack(0, 0, oid))
    width = np.dtype(dtype).itemsize
    body = np.empty(n, dtype=[("length", ">i4"), ("value", dtype)])
    body["length"] = width
    body["value"] = values
    return BinaryArray(_HEAD.pack(1, 0, oid, n, 1) + body.tobytes())


class BinaryArrayDumper(Dumper):
    """Sends a BinaryArray as it is, in the binary format (type left to the
    statement's cast)."""

    format = Format.BINARY

    def dump(self, obj):
        return obj.data


def register(adapters):
    """Let a psycopg connection or cursor (its ``adapters``) send BinaryArrays."""
    adapters.register_dumper(BinaryArray, BinaryArrayDumper)
