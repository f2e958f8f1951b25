"""The check of a printed certificate line, shared by the command-line tests."""

import re


def assert_certificate_line(printed: str, prefix: str, depth: int) -> None:
    """The certificate either bounds the fidelity below 100% or says that nothing is proven
    (never "no tree agrees on more than 100.0%")."""
    line = next(t for t in printed.splitlines() if t.strip().startswith(prefix.strip()))
    said = line.strip()[len(prefix.strip()):].strip()
    bound = re.match(rf"No tree of depth {depth} .* agrees with the ensemble on more than "
                     r"([0-9.]+)% \(weighted\)", said)
    if bound is not None:
        assert float(bound.group(1)) < 100.0
    else:
        assert said.startswith(f"Nothing is proven: no tree of depth {depth} "), said
        assert "Tried: " in said and "gap 1.00." in said
