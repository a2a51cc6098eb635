"""Coverage-guided fuzzing of the line codec (bench/rigbench/wire) with atheris, if it is installed.

atheris is a fuzzing tool, not a rigbench dependency: ``pip install atheris`` to use this.
Each input is cut into chunks (the cut points come from the input too) and fed to a
``HostCodec`` and a ``BoardCodec``. A finding is anything that raises, a decoder that
buffers more than a line, or a decoded message that does not survive its own round trip
(encoded and decoded it stays the same message, once numbers are in the codec's own
digits). The protocol's test vectors
(protocol/vectors/frames.json) are written into the corpus folder as seeds.

    python scripts/fuzz_codec.py [CORPUS_DIR] [-max_total_time=60] [other libFuzzer flags]
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

try:
    import atheris
except ImportError:
    print("fuzz_codec: atheris is not installed (pip install atheris; it is a fuzzing tool, "
          "not a rigbench dependency). Nothing was fuzzed.")
    sys.exit(0)

with atheris.instrument_imports(include=["rigbench.wire"]):
    from rigbench.wire import BoardCodec, HostCodec, LocalProtocolError
    from rigbench.wire.frame import MAX_LINE, BadFrame, KillByte


def seed_corpus(folder: Path) -> int:
    """Write the good and bad frames of the protocol vectors into ``folder`` (if empty)."""
    folder.mkdir(parents=True, exist_ok=True)
    if any(folder.iterdir()):
        return 0
    vectors = json.loads((ROOT / "protocol" / "vectors" / "frames.json").read_text())
    n = 0
    for item in vectors["good"] + vectors["bad"]:
        frame = item["frame"]
        data = frame.encode("latin-1") if isinstance(frame, str) else bytes(frame)
        (folder / f"vector-{n:03d}").write_bytes(b"\x00" + data)   # first byte: cut points
        n += 1
    return n


def one_input(data: bytes) -> None:
    if not data:
        return
    cut_every = 1 + data[0] % 64          # the input chooses how it is cut into reads
    stream = data[1:]
    chunks = [stream[i:i + cut_every] for i in range(0, len(stream), cut_every)]
    for codec in (HostCodec(), BoardCodec()):
        for chunk in chunks:
            for msg in codec.receive(chunk):
                if isinstance(msg, (BadFrame, KillByte)):
                    continue
                try:
                    again = codec.encode(msg)
                except LocalProtocolError as exc:
                    raise AssertionError(f"decoded {msg!r} but cannot send it: {exc}") from None
                # numbers are sent with 6 or 7 significant digits: after one pass the text
                # is the codec's own, and a second pass must change nothing
                (norm,) = type(codec)().receive(again)
                back = type(codec)().receive(codec.encode(norm))
                if back != [norm] or type(norm) is not type(msg):
                    raise AssertionError(f"round trip changed {msg!r} into {back!r}")
            if codec._frames.buffered >= MAX_LINE:
                raise AssertionError(f"decoder holds {codec._frames.buffered} bytes")


def main() -> None:
    folders = [a for a in sys.argv[1:] if not a.startswith("-")]
    if folders:
        n = seed_corpus(Path(folders[0]))
        if n:
            print(f"fuzz_codec: seeded {folders[0]} with {n} protocol vectors")
    atheris.Setup(sys.argv, one_input)
    atheris.Fuzz()


if __name__ == "__main__":
    main()
