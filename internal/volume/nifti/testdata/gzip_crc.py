"""Reference for TestNIfTIGzipCRCFarAfterImage: Python's gzip module (which
checks each member's CRC-32 and ISIZE, RFC 1952 section 2.3.1) on the file
named by the first argument. Writes JSON {"ok": bool, "error": str}."""
import gzip
import json
import sys

try:
    with gzip.open(sys.argv[1]) as f:
        while f.read(1 << 24):
            pass
    print(json.dumps({"ok": True, "error": ""}))
except Exception as e:  # noqa: BLE001 - any refusal is the answer
    print(json.dumps({"ok": False, "error": str(e)}))
