"""Every size and magnitude limit the readers and writers enforce, each chosen once, here.

Files come from other programs, so every reader bounds what it allocates and every number
it keeps. One table means a file is accepted or refused the same way whichever path reads
it (TSPLIB, CSV, a trail, JSON Lines). `tracer.base.schema` re-exports these names. Over-long
text is refused with a message, never cut, so a name reads the same wherever it is shown; a
name we make ourselves (a file's stem) is cut to `MAX_TEXT` before it is used.
"""

from __future__ import annotations

# -- cities ------------------------------------------------------------------------------

#: Most cities of a trail: its header holds the n×n matrix (16.7 million cells at 4096,
#: within `MAX_HEADER_ITEMS`) and its city columns fit uint16 with room for the sentinel.
#: The JSON Lines importer reads into a trail, so it has the same limit.
MAX_TRAIL_CITIES = 4096
#: Most cities of an instance file given by coordinates (TSPLIB or CSV): 16 bytes a city,
#: so 16 MB; enough to describe it and build start tours without a full matrix.
MAX_FILE_CITIES = 1_000_000
#: Most cities of an instance file given as an explicit matrix: up to 4 million numbers to
#: parse as text.
MAX_EXPLICIT_CITIES = 2_000
#: Largest instance whose full n×n distance matrix is built (8 bytes a cell: 800 MB).
MATRIX_MAX_CITIES = 10_000

# -- magnitudes --------------------------------------------------------------------------

#: Largest magnitude of a recorded length (partial, tree, links, bound, a tour): float64
#: holds every whole number below 2**53 exactly, so integer lengths stay exact whichever
#: column dtype holds them.
MAX_LENGTH = 2**53
#: Largest magnitude of an edge weight (a matrix entry): `MAX_TRAIL_CITIES` edges of this
#: weight sum to 4.1e15, below `MAX_LENGTH`, so every path and tour of a trail is exact.
MAX_EDGE = 1e12
#: Largest magnitude of a coordinate: an edge between two points is at most |dx| + |dy|
#: <= 4 × this (Manhattan, the longest of the planar rules), so at most `MAX_EDGE`.
MAX_COORDINATE = MAX_EDGE / 4

# -- text --------------------------------------------------------------------------------

#: Longest free text kept from a file: an instance name, a solver's engine, start, order or
#: fault. Longer text is refused.
MAX_TEXT = 200
#: Longest name from a small vocabulary: a bound (ours or a foreign solver's), a record
#: mode, a column, a dtype, a step rule. Longer names are refused.
MAX_WORD = 60

# -- nodes and frames --------------------------------------------------------------------

#: Most nodes in one trail: ids and visit positions fit uint32 arithmetic with room to spare.
MAX_TRAIL_NODES = 1 << 32
#: Most nodes in one node block (so a block's columns are bounded before decompression).
MAX_BLOCK_NODES = 1 << 20
#: Most decoded bytes a trail's node columns may claim per byte of node frames read so far.
#: zstd decodes constant data at up to ~30 000:1, so without this a 15 kB file can claim
#: gigabytes of columns; our own trails decode to 6-35 times their size (35: a full
#: enumeration recorded as decisions only, the most regular there is), so 1024 leaves a
#: wide margin and a file claiming more is refused before anything is allocated.
MAX_DECODED_RATIO = 1024
#: Decoded bytes always allowed besides `MAX_DECODED_RATIO` (so a small trail of a very
#: regular search is never refused): one full block of the widest row of a small instance.
DECODED_ALLOWANCE = 64 * 1024 * 1024
#: Largest instance file read (TSPLIB or CSV), in bytes: it is read whole, as text.
MAX_FILE_BYTES = 512 * 1024 * 1024
#: Largest frame (or JSON line) in bytes: a full block of the widest columns fits.
MAX_FRAME_BYTES = 64 * 1024 * 1024
#: Largest JSON line after the header (a node, best or end line), in bytes: a path or a
#: tour of `MAX_TRAIL_CITIES` cities takes about 25 kB, so this is ample, and a line that
#: never ends is refused after reading this much, not the frame limit.
MAX_LINE_BYTES = 1024 * 1024
#: Most columns in a trail header (room for every known column).
MAX_COLUMNS = 16
#: Longest string in a trail frame, in bytes (every text limit above fits, in UTF-8).
MAX_STRING_BYTES = 1 << 16
#: Most entries in a map of a trail frame (a frame's keys, a block's columns, a header's
#: solver settings).
MAX_MAP_ITEMS = 64
#: Most items in a list of a trail frame: a tour, a row of a matrix given as lists.
MAX_LIST_ITEMS = MAX_TRAIL_CITIES
#: Most list items in a header (coordinates and matrix given as lists): the matrix of
#: `MAX_TRAIL_CITIES` cities.
MAX_HEADER_ITEMS = MAX_TRAIL_CITIES * MAX_TRAIL_CITIES
#: Node ids in a JSON Lines trace are signed 64-bit whole numbers.
MIN_NODE_ID, MAX_NODE_ID = -(2**63), 2**63 - 1
#: The default memory setting (MB) of the commands that can read a trail block by block: a
#: trail whose in-memory analysis needs more (`in_memory_bytes`) is read block by block. A
#: quarter of an 8 GB machine, leaving room for the rest.
DEFAULT_MEMORY_MB = 2048
