"""Shared pieces of the hardening tests: running the command line, and small synthesized photos.

Every photo here is made by the tests themselves (critline.synth, Pillow,
OpenCV, scikit-image's bundled sample images); nothing is downloaded.
"""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
from contextlib import redirect_stderr, redirect_stdout
from dataclasses import dataclass
from pathlib import Path

import numpy as np

#: the real console entry point, as a child process
CLI = [sys.executable, "-c", "from critline.cli import run; run()"]

#: small clean frames: the reader's full path at a fraction of a phone photo's cost
SMALL = dict(light="sodium", megapixels=0.25, field_diameter=0.8, crescent=0.0, defocus=0.0, motion=0.0,
             field_cx=0.5, field_cy=0.5, polariser="both", exposure=0.8, orientation=1, liquid_line=0.0)


@dataclass(frozen=True)
class Run:
    code: int
    out: str
    err: str

    def json(self) -> dict:
        return strict_json(self.out)


def strict_json(text: str):
    """Parse JSON refusing NaN and Infinity (which Python's json would otherwise accept)."""

    def refuse(name):
        raise ValueError(f"non-finite number {name} in JSON output")

    return json.loads(text, parse_constant=refuse)


def cli(*args: str | os.PathLike) -> Run:
    """``critline ARGS`` in this process (critline.cli.main), capturing stdout and stderr."""
    from critline.cli import main

    out, err = io.StringIO(), io.StringIO()
    with redirect_stdout(out), redirect_stderr(err):
        code = main([os.fspath(a) for a in args])
    return Run(code, out.getvalue(), err.getvalue())


def cli_process(*args: str | os.PathLike, env: dict | None = None, timeout: float = 120,
                prelude: str | None = None, cwd=None) -> Run:
    """``critline ARGS`` as a child process (the console script's own code path)."""
    cmd = list(CLI)
    if prelude:
        cmd[2] = prelude + "\n" + cmd[2]
    full_env = dict(os.environ, **(env or {}))
    p = subprocess.run(cmd + [os.fspath(a) for a in args], capture_output=True, text=True,
                       timeout=timeout, env=full_env, cwd=cwd)
    return Run(p.returncode, p.stdout, p.stderr)


def assert_clean_stderr(err: str) -> None:
    """No traceback, and every line is one of critline's own one-line messages."""
    assert "Traceback" not in err, err
    for line in err.splitlines():
        if line.strip():
            assert line.startswith("critline"), f"stray diagnostic line: {line!r}"


def render_small(seed: int, **overrides):
    """RGB image (as displayed) and ground truth of a small clean eyepiece photo."""
    from critline.synth import random_scene, render

    scene = random_scene(seed, **{**SMALL, **overrides})
    return render(scene, seed)


def write_image(path: Path, image: np.ndarray, fmt: str = "jpeg", orientation: int = 1, quality: int = 92) -> Path:
    from critline.synth import encode

    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_bytes(encode(image, fmt, quality, orientation))
    return path


def variant(image: np.ndarray, k: int) -> np.ndarray:
    """A distinct photo of the same view: a small dim patch in the dark corner, its grey level and
    place set by ``k`` (JPEG keeps it, so the bytes differ and each variant has a cache entry of
    its own), at no rendering cost."""
    out = image.copy()
    row, col = 2 + 8 * (k // 12), 2 + 8 * (k % 12)
    out[row:row + 6, col:col + 6] = 12 + 3 * (k % 13)
    return out
