"""Reference for the vectors carried in records: IEEE 754 doubles, little-endian, base64 (RFC 4648),
with Python's base64 and numpy (Debian's python3-numpy).

  carried_reference.py decode BASE64      -> the doubles, one per line, repr (round-trip exact)
  carried_reference.py encode X1 X2 ...   -> the base64 of those doubles
"""
import base64
import sys

import numpy as np

if sys.argv[1] == "decode":
    for x in np.frombuffer(base64.b64decode(sys.argv[2], validate=True), dtype="<f8"):
        print(repr(float(x)))
else:
    print(base64.b64encode(np.array([float(x) for x in sys.argv[2:]], dtype="<f8").tobytes()).decode())
