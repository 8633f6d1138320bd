"""Sign, archive and verify 1000 records; print records per second and the archive's size.

Run: .venv/bin/python benchmarks/bench_records.py [N] [PROTOCOL]

Each record carries the full assessment of one of the invented demo protocols in protocols/ (assessed
once, then each record gets its own id and title), signed as authored and reviewed, appended to a fresh
archive (WAL, synchronous=FULL: every append is on disk before it returns), then verified from its
stored bytes, and finally the whole chain is verified.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from planner import archive, keys, records  # noqa: E402
from planner.assessment import assess  # noqa: E402
from planner.protocol import load_protocol  # noqa: E402


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1000
    protocol_path = Path(sys.argv[2]) if len(sys.argv) > 2 else ROOT / "protocols" / "rigid-chamber-hold.yaml"
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        t = time.perf_counter()
        protocol = load_protocol(protocol_path)
        assessment = assess(protocol).to_dict()
        text = protocol_path.read_text(encoding="utf-8")
        t_assess = time.perf_counter() - t

        passphrase = "benchmark passphrase"
        t = time.perf_counter()
        keys.generate_key("Ada Author", "ada", tmp / "ada", passphrase)
        keys.generate_key("Rui Reviewer", "rui", tmp / "rui", passphrase)
        ada = keys.load_key(tmp / "ada", passphrase)
        rui = keys.load_key(tmp / "rui", passphrase)
        t_keys = time.perf_counter() - t

        store = archive.Archive.open(tmp / "archive.sqlite")
        store.register_key(ada.public_entry())
        store.register_key(rui.public_entry())

        stored: list[bytes] = []
        t = time.perf_counter()
        for i in range(n):
            assessment["title"] = f"{protocol.title} #{i}"
            r = records.build_record(text, assessment, protocol_name=protocol_path.name, protocol_parsed=protocol.entered)
            r = records.sign_record(records.sign_record(r, ada, "authored"), rui, "reviewed")
            stored.append(records.record_bytes(r))
        t_sign = time.perf_counter() - t

        t = time.perf_counter()
        for data in stored:
            store.append_record(data)
        t_append = time.perf_counter() - t

        ring = store.keyring()
        t = time.perf_counter()
        bad = sum(not records.verify_record(data, ring).ok for data in stored)
        t_verify = time.perf_counter() - t

        t = time.perf_counter()
        chain = store.verify()
        t_chain = time.perf_counter() - t
        store.close()

        size = sum(p.stat().st_size for p in tmp.glob("archive.sqlite*"))
        record_size = sum(len(d) for d in stored) / n
        total = t_sign + t_append + t_verify
        print(f"records                     {n} (protocol {protocol_path.name}, {record_size / 1024:.1f} KiB each)")
        print(f"assessment (once)           {t_assess:.2f} s")
        print(f"two keys, default KDF       {t_keys:.2f} s (generate and unlock, {keys.DEFAULT_KDF_ROUNDS} bcrypt rounds)")
        print(f"build + sign x2             {n / t_sign:8.1f} records/s  ({t_sign:.2f} s)")
        print(f"archive append (fsync)      {n / t_append:8.1f} records/s  ({t_append:.2f} s)")
        print(f"verify from stored bytes    {n / t_verify:8.1f} records/s  ({t_verify:.2f} s, {bad} failed)")
        print(f"sign + archive + verify     {n / total:8.1f} records/s  ({total:.2f} s)")
        print(f"archive verify (full chain) {chain.entries / t_chain:8.1f} entries/s ({t_chain:.2f} s, ok={chain.ok})")
        print(f"archive size                {size / 1024 / 1024:.2f} MiB ({size / n / 1024:.1f} KiB per record)")


if __name__ == "__main__":
    main()
