"""Finished tiles kept on disk, so an interrupted run can resume.

A run writes each finished tile's pieces and fragments to a folder next to
the output (``OUTPUT.lineament-resume/``), keyed by the inputs (path, size,
modification time), the settings, the tile size and the package version.
``--resume`` reuses tiles whose key matches and computes the rest; the
folder is removed once the output has been written.  Files are plain numpy
``.npz`` archives read with ``allow_pickle=False``: nothing read back is
executed or unpickled.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
from pathlib import Path

import numpy as np

from ._version import __version__
from .crossings import Fragment


def resume_folder(output: str | os.PathLike) -> Path:
    """Folder holding the finished tiles of a run writing ``output``."""
    p = Path(output)
    return p.with_name(p.name + ".lineament-resume")


def input_identity(paths: list[str]) -> list[dict]:
    """What identifies the inputs: absolute path, size and modification time."""
    out = []
    for path in paths:
        try:
            st = os.stat(path)
            out.append({"path": os.path.abspath(path), "size": st.st_size, "mtime_ns": st.st_mtime_ns})
        except OSError:
            out.append({"path": str(path)})
    return out


def _profiles(name: str, profiles: list) -> dict:
    """Scale profiles (one row per piece) when scale selection ran, else nothing."""
    if not profiles or profiles[0] is None:
        return {}
    return {name: np.vstack(profiles)}


def _atomic_savez(path: Path, **arrays) -> None:
    tmp = path.with_name(path.name + ".tmp.npz")
    np.savez(tmp, **arrays)
    os.replace(tmp, path)


class TileCache:
    """Finished tiles of one run (one mosaic group) in a folder.

    Parameters
    ----------
    folder : pathlib.Path
    key : dict
        JSON-ready description of the run; a cache with another key is discarded.
    resume : bool
        Reuse matching tiles; when False any earlier content is discarded.
    """

    def __init__(self, folder: Path, key: dict, *, resume: bool) -> None:
        self.folder = Path(folder)
        key = dict(key, version=__version__)
        self.digest = hashlib.sha256(json.dumps(key, sort_keys=True, default=str).encode()).hexdigest()
        stamp = self.folder / "key.json"
        matches = False
        if resume and stamp.exists():
            try:
                matches = json.loads(stamp.read_text()).get("digest") == self.digest
            except (OSError, ValueError):
                matches = False
        if not matches and self.folder.exists():
            shutil.rmtree(self.folder, ignore_errors=True)
        self.folder.mkdir(parents=True, exist_ok=True)
        if not matches:
            stamp.write_text(json.dumps({"digest": self.digest, "key": key}, default=str, indent=1))
        self.reused = 0

    # -------------------------------------------------------------- noise
    def save_noise(self, samples: list[dict], band: int = 0) -> None:
        arrays = {}
        for b, block in enumerate(samples):
            for (si, di), (comps, floor, factor) in block.items():
                arrays[f"b{b}_s{si}_d{di}"] = comps
                arrays[f"b{b}_s{si}_d{di}_meta"] = np.array([floor, factor])
        arrays["blocks"] = np.array([len(samples)])
        _atomic_savez(self.folder / f"noise_{band}.npz", **arrays)

    def load_noise(self, band: int = 0) -> list[dict] | None:
        path = self.folder / f"noise_{band}.npz"
        if not path.exists():
            return None
        try:
            with np.load(path, allow_pickle=False) as z:
                n = int(z["blocks"][0])
                out = [dict() for _ in range(n)]
                for name in z.files:
                    if name == "blocks" or name.endswith("_meta"):
                        continue
                    b, s, d = (int(part[1:]) for part in name.split("_"))
                    meta = z[name + "_meta"]
                    out[b][(s, d)] = (z[name], float(meta[0]), float(meta[1]))
            return out
        except (OSError, ValueError, KeyError):
            return None

    # -------------------------------------------------------------- tiles
    def save_tile(self, index: int, output) -> None:
        pieces, frags = output.pieces, output.fragments
        pc = np.array([p[2].size for p in pieces], dtype=np.int64)
        fc = np.array([f.rows.size for _, _, f, _ in frags], dtype=np.int64)
        cat = lambda xs, dt: np.concatenate(xs).astype(dt) if xs else np.zeros(0, dt)  # noqa: E731
        _atomic_savez(
            self.folder / f"tile_{index}.npz",
            p_si=np.array([p[0] for p in pieces], dtype=np.int64),
            p_di=np.array([p[1] for p in pieces], dtype=np.int64),
            p_n=pc,
            p_r=cat([p[2] for p in pieces], np.float64),
            p_c=cat([p[3] for p in pieces], np.float64),
            p_s=cat([p[4] for p in pieces], np.float32),
            f_si=np.array([f[0] for f in frags], dtype=np.int64),
            f_di=np.array([f[1] for f in frags], dtype=np.int64),
            f_n=fc,
            f_open=np.array([(f.start_open, f.end_open) for _, _, f, _ in frags], dtype=bool).reshape(-1, 2),
            f_r=cat([f.rows for _, _, f, _ in frags], np.float64),
            f_c=cat([f.cols for _, _, f, _ in frags], np.float64),
            f_s=cat([f.strength for _, _, f, _ in frags], np.float32),
            **_profiles("p_prof", [p[5] for p in pieces]),
            **_profiles("f_prof", [f[3] for f in frags]),
        )

    def load_tile(self, index: int):
        from .pipeline import TileOutput

        path = self.folder / f"tile_{index}.npz"
        if not path.exists():
            return None
        try:
            with np.load(path, allow_pickle=False) as z:
                pieces, frags = [], []
                bounds = np.concatenate(([0], np.cumsum(z["p_n"])))
                pr, pcol, ps = z["p_r"], z["p_c"], z["p_s"]
                pprof = z["p_prof"] if "p_prof" in z.files else None
                fprof = z["f_prof"] if "f_prof" in z.files else None
                for k in range(z["p_n"].size):
                    a, b = bounds[k], bounds[k + 1]
                    pieces.append((int(z["p_si"][k]), int(z["p_di"][k]), pr[a:b], pcol[a:b], ps[a:b],
                                   None if pprof is None else pprof[k]))
                bounds = np.concatenate(([0], np.cumsum(z["f_n"])))
                fr, fcol, fs, fo = z["f_r"], z["f_c"], z["f_s"], z["f_open"]
                for k in range(z["f_n"].size):
                    a, b = bounds[k], bounds[k + 1]
                    frags.append((int(z["f_si"][k]), int(z["f_di"][k]),
                                  Fragment(fr[a:b], fcol[a:b], fs[a:b], bool(fo[k, 0]), bool(fo[k, 1])),
                                  None if fprof is None else fprof[k]))
        except (OSError, ValueError, KeyError):
            return None
        self.reused += 1
        return TileOutput(pieces, frags)

    def remove(self) -> None:
        shutil.rmtree(self.folder, ignore_errors=True)
