"""The lab's own files in: plate-reader matrices, any table format, column mapping, layouts."""

from .columns import find_column, split_header, standardise_columns
from .files import READABLE_SUFFIXES, read_any_table
from .plate_matrix import parse_plate_matrix, read_plate_matrix, write_plate_matrix
from .wells import normalise_wells, parse_well, well_name

__all__ = [
    "READABLE_SUFFIXES",
    "find_column",
    "normalise_wells",
    "parse_plate_matrix",
    "parse_well",
    "read_any_table",
    "read_plate_matrix",
    "split_header",
    "standardise_columns",
    "well_name",
    "write_plate_matrix",
]
