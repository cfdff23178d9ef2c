"""The solver's compiled inner loop (``_kernel.c``), loaded through ctypes.

The kernel integrates backward-Euler periods of a batch of variants exactly as the numpy
reference in ``solver`` does (same grid, Newton iteration, limiting and tolerances); only the
linear algebra differs: a skyline L·D·Lᵀ factorisation in an elimination order computed here
from the netlist, so each factorisation costs time linear in the number of stages. It is built
by ``pip install`` (``hatch_build.py``); where no C compiler was available the package still
installs and the solver runs the numpy reference instead (``available()`` says which). A build
older than its source beside it (an edited ``_kernel.c`` not yet compiled again) is not used.
"""

from __future__ import annotations

import ctypes
import hashlib
import importlib.util
import os
import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params

ABI = 1  # must match FT_ABI in _kernel.c: a stale build is not used
_MODULE = "fieldtool.core.circuit._kernel"
_state: dict[str, object] = {}


class _Board(ctypes.Structure):
    _fields_ = [
        ("n", ctypes.c_int),
        ("k", ctypes.c_int),
        ("m", ctypes.c_int),
        ("B", ctypes.c_int),
        *((name, ctypes.c_void_p) for name in ("perm", "d_a", "d_c", "c_p", "c_q", "first")),
        ("start", ctypes.c_void_p),
        ("vntol", ctypes.c_double),
        ("reltol", ctypes.c_double),
        ("max_newton", ctypes.c_int),
        *(
            (name, ctypes.c_void_p)
            for name in (
                *("d_is", "d_nvt", "d_rs", "d_gp", "d_vcrit"),
                *("c_f", "c_esr", "c_gl", "g_node", "i_load"),
            )
        ),
    ]


def _load() -> ctypes.CDLL | None:
    if "lib" in _state:
        return _state["lib"]  # type: ignore[return-value]
    lib = None
    spec = importlib.util.find_spec(_MODULE)
    if spec is not None and spec.origin:
        try:
            lib = ctypes.CDLL(spec.origin)
            lib.ft_abi.restype = ctypes.c_int
            lib.ft_source_hash.restype = ctypes.c_char_p
            if lib.ft_abi() != ABI or not _current(Path(spec.origin), lib.ft_source_hash()):
                lib = None
        except (OSError, AttributeError):
            lib = None
    if lib is not None:
        ptr = ctypes.c_void_p
        lib.ft_period.restype = ctypes.c_int
        lib.ft_period.argtypes = [ctypes.POINTER(_Board), ctypes.c_int, *[ptr] * 12]
        lib.ft_response.restype = ctypes.c_int
        lib.ft_response.argtypes = [
            ctypes.POINTER(_Board),
            ctypes.c_int,
            *[ptr] * 5,
            ctypes.c_int,
            ctypes.c_int,
            *[ptr] * 6,
        ]
    _state["lib"] = lib
    return lib


def _current(built: Path, compiled_hash: bytes) -> bool:
    """False when the C source beside the build differs from the one it was compiled from."""
    source = built.with_name("_kernel.c")
    if not source.exists():
        return True  # an installed wheel carries no source
    digest = hashlib.sha256(source.read_bytes()).hexdigest()[:16]
    return compiled_hash.decode() == digest


def available() -> bool:
    """True when the compiled kernel is built, current and in use."""
    return not _state.get("off") and _load() is not None


@contextmanager
def disabled() -> Iterator[None]:
    """Run the numpy reference inside this block (tests compare the two; benchmarks time both)."""
    before = _state.get("off", False)
    _state["off"] = True
    try:
        yield
    finally:
        _state["off"] = before


@dataclass(frozen=True)
class Ordering:
    """An elimination order of a circuit's nodes and the envelope of its factor."""

    perm: np.ndarray  # (n,) position → node column (0-based)
    position: np.ndarray  # (n,) node column → position
    first: np.ndarray  # (n,) first column of each row's envelope
    start: np.ndarray  # (n+1,) offsets of the rows in packed storage


def ordering(circuit: Circuit) -> Ordering:
    """The circuit's elimination order (cached by its structure)."""
    hubs = tuple(sorted({s.node for s in circuit.sources}))
    return _ordering(circuit.n, circuit.diode_nodes.tobytes(), circuit.cap_nodes.tobytes(), hubs)


@lru_cache(maxsize=64)
def _ordering(n: int, diodes: bytes, caps: bytes, hubs: tuple[int, ...]) -> Ordering:
    """Reverse Cuthill–McKee over the nodes other than the sources, the sources last.

    A source node (the drive rail) touches every stage; left in the middle it would fill the
    factor, placed last it adds one full row per source (George & Liu, 1981, ch. 4).
    """
    pairs = np.concatenate(
        [np.frombuffer(diodes, dtype=np.intp), np.frombuffer(caps, dtype=np.intp)]
    ).reshape(-1, 2)
    nbrs: list[set[int]] = [set() for _ in range(n + 1)]
    for a, b in pairs:
        if a and b and a != b:
            nbrs[a].add(b)
            nbrs[b].add(a)
    hub = set(hubs)
    inner = [i for i in range(1, n + 1) if i not in hub]

    def degree(i: int) -> int:
        return sum(1 for j in nbrs[i] if j not in hub)

    order: list[int] = []
    seen: set[int] = set()
    for root in sorted(inner, key=lambda i: (degree(i), i)):
        if root in seen:
            continue
        seen.add(root)
        queue = [root]
        while queue:
            node = queue.pop(0)
            order.append(node)
            nxt = sorted((j for j in nbrs[node] if j not in hub and j not in seen), key=degree)
            seen.update(nxt)
            queue += nxt
    order = order[::-1] + list(hubs)
    position = np.empty(n, dtype=np.intc)
    for pos, node in enumerate(order):
        position[node - 1] = pos
    first = np.arange(n, dtype=np.intc)
    for i in range(1, n + 1):
        for j in nbrs[i]:
            pi, pj = position[i - 1], position[j - 1]
            if pj < pi:
                first[pi] = min(first[pi], pj)
    start = np.zeros(n + 1, dtype=np.intc)
    start[1:] = np.cumsum(np.arange(n) - first + 1)
    perm = np.array([node - 1 for node in order], dtype=np.intc)
    return Ordering(perm, position, first, start)


def _ptr(a: np.ndarray | None) -> int | None:
    return None if a is None else a.ctypes.data


def _f64(a: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.float64)


class Board:
    """A batch of variants laid out for the kernel (the arrays stay referenced here)."""

    def __init__(
        self,
        circuit: Circuit,
        params: Params,
        source_g: np.ndarray,
        vcrit: np.ndarray,
        gmin: float,
        vntol: float,
        reltol: float,
        max_newton: int,
    ) -> None:
        o = ordering(circuit)
        pos = np.append(o.position, -1).astype(np.intc)  # node 0 (ground) → -1 via index -1

        def place(nodes: np.ndarray) -> np.ndarray:
            return np.ascontiguousarray(pos[nodes - 1], dtype=np.intc)

        self.order = o
        self.keep = [
            place(circuit.diode_nodes[:, 0]),
            place(circuit.diode_nodes[:, 1]),
            place(circuit.cap_nodes[:, 0]),
            place(circuit.cap_nodes[:, 1]),
        ]
        values = {
            "d_is": params.d_is,
            "d_nvt": params.d_nvt,
            "d_rs": params.d_rs,
            "d_gp": params.d_gp,
            "d_vcrit": vcrit,
            "c_f": params.c_f,
            "c_esr": params.c_esr,
            "c_gl": params.c_gl,
            "g_node": gmin + params.g_shunt + source_g,
            "i_load": params.i_load,
        }
        self.values = {name: _f64(v) for name, v in values.items()}
        self.shape = (circuit.n, len(circuit.diode_refs), len(circuit.cap_refs), params.batch)
        n, k, m, B = self.shape
        d_a, d_c, c_p, c_q = self.keep
        self.struct = _Board(
            n,
            k,
            m,
            B,
            _ptr(o.perm),
            _ptr(d_a),
            _ptr(d_c),
            _ptr(c_p),
            _ptr(c_q),
            _ptr(o.first),
            _ptr(o.start),
            vntol,
            reltol,
            max_newton,
            *(_ptr(self.values[name]) for name, _ in _Board._fields_[14:]),
        )

    def period(
        self,
        steps: np.ndarray,
        inj: np.ndarray,
        x0: np.ndarray,
        v: np.ndarray,
        vj: np.ndarray,
        guess: tuple[np.ndarray, np.ndarray] | None,
        sens: bool,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray | None, np.ndarray]:
        """One period: (V (B,T,n), X (B,T,m), VJ (B,T,k), monodromy or None, Newton counts).

        ``v`` and ``vj`` (B, n) and (B, k) are the Newton start, updated in place to the
        period's end.
        """
        lib = _load()
        n, k, m, B = self.shape
        T = len(steps)
        steps, inj, x0 = _f64(steps), _f64(inj), _f64(x0)
        gv = gvj = None
        if guess is not None:
            gv, gvj = _f64(guess[0]), _f64(guess[1])
        V = np.empty((B, T, n))
        X = np.empty((B, T, m))
        VJ = np.empty((B, T, k))
        M = np.empty((B, m, m)) if sens else None
        its = np.zeros(B, dtype=np.int64)
        rows = (inj, x0, v, vj, gv, gvj, V, X, VJ, M, its)

        def call(board: _Board, r0: int) -> int:
            return lib.ft_period(  # type: ignore[union-attr]
                ctypes.byref(board), T, _ptr(steps), *(_row(a, r0) for a in rows)
            )

        self._run(call)
        return V, X, VJ, M, its

    def response(
        self,
        steps: np.ndarray,
        inj: np.ndarray,
        inj_drive: np.ndarray,
        inj_supply: np.ndarray,
        x0: np.ndarray,
        c: int,
        probe: np.ndarray,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Variational equations over one period: (phi, avg, v_avg, v_min, v_max)."""
        lib = _load()
        n, k, m, B = self.shape
        P = len(probe)
        cols = m + c + k + 2 + P
        probe = np.ascontiguousarray(probe, dtype=np.intc)
        steps = _f64(steps)
        inputs = [_f64(a) for a in (inj, inj_drive, inj_supply, x0)]
        phi = np.empty((B, m, cols))
        avg = np.empty((B, P, cols))
        v_avg, v_min, v_max = (np.empty((B, P)) for _ in range(3))
        outputs = (phi, avg, v_avg, v_min, v_max)

        def call(board: _Board, r0: int) -> int:
            return lib.ft_response(  # type: ignore[union-attr]
                ctypes.byref(board),
                len(steps),
                _ptr(steps),
                *(_row(a, r0) for a in inputs),
                c,
                P,
                _ptr(probe),
                *(_row(a, r0) for a in outputs),
            )

        self._run(call)
        return phi, avg, v_avg, v_min, v_max

    def _run(self, call: Callable[[_Board, int], int]) -> None:
        """Run ``call`` on the whole batch, or on slices of its rows in parallel threads.

        The kernel works on each variant alone, so slices of rows are independent; ctypes
        releases the interpreter lock during the call, so the threads use separate cores.
        """
        B = self.shape[3]
        parts = _workers(B)
        if parts == 1:
            codes = [call(self.struct, 0)]
        else:
            bounds = [B * i // parts for i in range(parts + 1)]
            codes = [0] * parts

            def work(i: int) -> None:
                codes[i] = call(self._rows(bounds[i], bounds[i + 1]), bounds[i])

            threads = [threading.Thread(target=work, args=(i,)) for i in range(1, parts)]
            for t in threads:
                t.start()
            work(0)
            for t in threads:
                t.join()
        if any(codes):
            raise MemoryError("the solver kernel could not allocate its work space")

    def _rows(self, r0: int, r1: int) -> _Board:
        """The board's struct for variants r0 … r1 − 1."""
        part = _Board.from_buffer_copy(self.struct)
        part.B = r1 - r0
        for name, _ in _Board._fields_[14:]:
            setattr(part, name, _row(self.values[name], r0))
        return part


MIN_ROWS_PER_THREAD = 8  # below this a thread costs more than it saves


def _workers(batch: int) -> int:
    """How many threads a batch of variants is split over (at most one per usable CPU)."""
    if _state.get("threads") is None:
        try:
            cpus = len(os.sched_getaffinity(0))
        except AttributeError:  # not on every platform
            cpus = os.cpu_count() or 1
        _state["threads"] = max(1, min(cpus, 8))
    return max(1, min(int(_state["threads"]), batch // MIN_ROWS_PER_THREAD))  # type: ignore[call-overload]


def _row(a: np.ndarray | None, r0: int) -> int | None:
    """Address of row r0 of a row-major array (None stays None)."""
    return None if a is None else a.ctypes.data + r0 * a.strides[0]
