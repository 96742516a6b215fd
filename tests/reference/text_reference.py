#!/usr/bin/python3
"""Reference for file names in records (tests/detector/test_record_paths.cpp): Python's own UTF-8
codec and RFC 3986 percent-encoding.

Reads one hex-encoded byte string per line from FILE; prints per line, separated by spaces:
  1 or 0    whether bytes.decode("utf-8", "strict") accepts it
  HEX       bytes.decode("utf-8", "replace").encode() (Python substitutes U+FFFD for each maximal
            subpart, as the Unicode Standard, section 3.9, recommends)
  TEXT      urllib.parse.quote(bytes, safe="/") (RFC 3986 unreserved characters and "/" kept)
Usage: text_reference.py FILE
"""
import sys
import urllib.parse

with open(sys.argv[1]) as f:
    for line in f:
        raw = bytes.fromhex(line.strip())
        try:
            raw.decode("utf-8", "strict")
            valid = 1
        except UnicodeDecodeError:
            valid = 0
        replaced = raw.decode("utf-8", "replace").encode().hex() or "-"
        print(valid, replaced, urllib.parse.quote(raw, safe="/") or "-")
