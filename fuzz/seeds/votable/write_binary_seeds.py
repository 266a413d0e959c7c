#!/usr/bin/python3
# SPDX-License-Identifier: MIT
# Usage: /usr/bin/python3 fuzz/seeds/votable/write_binary_seeds.py fuzz/seeds
# Writes the binary VOTable seeds: votable/epoch_binary2.vot, a whole BINARY2 VOTable of two
# invented sources with Gaia-epoch-like array columns, and votable/epoch_flat_binary2.vot,
# the same epochs one per row (for fuzz_votable_table and fuzz_gaia_epoch), and
# votable_binary/*.bin, a first byte (bit 0: BINARY2; the bits above: the FIELD list of
# fuzz/fuzz_votable_binary.cpp) and a decoded stream of rows (for fuzz_votable_binary).
import base64, os, re, struct, sys
import numpy as np
from astropy.io.votable import tree as vo

out = sys.argv[1]
rng = np.random.default_rng(11)


def new_table(fields):
    vot = vo.VOTableFile()
    vot.resources.append(vo.Resource())
    table = (getattr(vo, "TableElement", None) or vo.Table)(vot)
    vot.resources[0].tables.append(table)
    for name, datatype, arraysize in fields:
        table.fields.append(vo.Field(vot, name=name, datatype=datatype, arraysize=arraysize))
    return vot, table


def fill(table, rows):
    table.create_arrays(len(rows))
    for i, row in enumerate(rows):
        for f, v in zip(table.fields, row):
            if f.arraysize and f.arraysize.endswith("*") and f.datatype not in ("char", "unicodeChar"):
                v = np.ma.array(v, mask=np.zeros(len(v), dtype=bool))
            table.array.data[f.name][i] = v


def stream_bytes(vot, form):
    path = out + "/votable_binary/tmp.vot"
    vot.to_xml(path, tabledata_format=form)
    text = open(path).read()
    return base64.b64decode(re.search(r"<STREAM[^>]*>(.*?)</STREAM>", text, re.S).group(1))


# FIELD list 1: Gaia epoch photometry, G band.
epoch_fields = [("source_id", "long", None), ("g_transit_time", "double", "*"),
                ("g_transit_mag", "double", "*"), ("g_transit_flux_over_error", "float", "*"),
                ("variability_flag_g_reject", "boolean", "*")]
epoch_rows = []
for sid, n in [(41012345, 6), (41076543, 4)]:
    t = np.sort(rng.uniform(1700, 2750, n))
    epoch_rows.append((sid, t, 11.2 + 0.3 * np.sin(2 * np.pi * t / 5.3671),
                       np.full(n, 500.0, dtype=np.float32), np.arange(n) % 3 == 0))
vot, table = new_table(epoch_fields)
fill(table, epoch_rows)
vot.to_xml(out + "/votable/epoch_binary2.vot", tabledata_format="binary2")
open(out + "/votable_binary/epoch_binary2.bin", "wb").write(b"\x03" + stream_bytes(vot, "binary2"))
open(out + "/votable_binary/epoch_binary.bin", "wb").write(b"\x02" + stream_bytes(vot, "binary"))

# The flat form (one epoch per row, its band in a column), BINARY2.
flat_fields = [("source_id", "long", None), ("band", "char", "*"), ("time", "double", None),
               ("mag", "double", None), ("flux", "double", None), ("flux_over_error", "float", None),
               ("rejected_by_photometry", "boolean", None), ("rejected_by_variability", "boolean", None)]
flat_rows = []
for sid, t, mag, snr, flags in epoch_rows:
    for k in range(len(t)):
        for band, shift in [("G", 0.0), ("BP", 0.4), ("RP", -0.6)]:
            m = mag[k] + shift
            flat_rows.append((sid, band, t[k], m, 10 ** (-0.4 * (m - 25.0)), snr[k], False, bool(flags[k])))
vot, table = new_table(flat_fields)
fill(table, flat_rows)
vot.to_xml(out + "/votable/epoch_flat_binary2.vot", tabledata_format="binary2")

# FIELD list 0: every datatype (the variable-length bit array left empty: astropy writes
# those unpacked).
type_fields = [("l", "long", None), ("c", "char", "*"), ("c8", "char", "8"),
               ("u", "unicodeChar", "*"), ("i", "int", None), ("s", "short", None),
               ("b", "unsignedByte", None), ("f", "float", None), ("d", "double", None),
               ("ok", "boolean", None), ("bit", "bit", None), ("t", "double", "*"),
               ("tf", "float", "*"), ("rej", "boolean", "*"), ("bits", "bit", "*"),
               ("cx", "doubleComplex", None)]
vot, table = new_table(type_fields)
fill(table, [(7, "Vell 1", "ab", "mega", 3, -2, 200, 1.5, 0.25, True, True, np.array([1.0, np.nan]),
              np.array([2.5], dtype=np.float32), np.array([True, False]), np.array([], dtype=bool), 1 + 2j),
             (-8, "", "cdefghij", "x", -1, 7, 0, np.nan, -1e300, False, False, np.array([]),
              np.array([], dtype=np.float32), np.array([], dtype=bool), np.array([], dtype=bool), 0j)])
open(out + "/votable_binary/types_binary2.bin", "wb").write(b"\x01" + stream_bytes(vot, "binary2"))

# FIELD list 2, by hand: int 3x*, short 2x2, double 4*, bit 11, unicodeChar 3, char 0,
# unsignedByte *; BINARY2, one mask byte.
row = (b"\x00" + struct.pack(">I3i", 1, 4, 0, -6) + struct.pack(">4h", 1, 2, 3, 4)
       + struct.pack(">I2d", 2, 0.5, 1.5) + bytes([0b10110000, 0b01100000])
       + "V\u00e9l".encode("utf-16-be") + struct.pack(">I", 3) + bytes([0, 128, 255]))
open(out + "/votable_binary/shapes_binary2.bin", "wb").write(b"\x05" + row + row)
os.remove(out + "/votable_binary/tmp.vot")
