"""The C board library (protocol/board-c) driven from Python through ctypes, with the same
interface as rigbench.rig.firmware.board.SimBoard: ``receive``, ``step``, ``output``, ``reboot``,
``time_s``/``time_us``, ``motor``, ``fault``.

The firmware logic is the C library's; the rig's plant and instruments are the Python
simulation's (rigbench.rig.firmware.boards), so a ``CBoard`` and a ``SimBoard`` made with the same rig,
seed and inputs see the same plant and can be compared byte for byte. ``use_c_engine``
makes every sim:// board of a test a CBoard (monkeypatching rigbench.rig.simlink.make_board).
"""

from __future__ import annotations

import ctypes as C
from pathlib import Path
from types import SimpleNamespace

import numpy as np

from rigbench.rig.firmware.boards import RigDef, rig_def
from rigbench.rig.firmware.board import SimBoard

from cbuild import built

U32 = 1 << 32
RX_PIECE = 128
class _Types:
    """The ctypes mirror of rb_board.h for one build: ``rb_real`` is double or float."""

    def __init__(self, real) -> None:
        self.real = real
        self.real_p = real_p = C.POINTER(real)

        class Param(C.Structure):
            _fields_ = [("name", C.c_char_p), ("unit", C.c_char_p), ("min", real),
                        ("max", real), ("value", real_p), ("writable", C.c_uint8)]

        class Signal(C.Structure):
            _fields_ = [("name", C.c_char_p), ("unit", C.c_char_p), ("value", real_p)]

        class Loop(C.Structure):
            _fields_ = [("name", C.c_char_p), ("measure", C.c_char_p), ("output", C.c_char_p),
                        ("kp", C.c_char_p), ("ki", C.c_char_p), ("kd", C.c_char_p),
                        ("plant", C.c_int), ("relay", C.c_int), ("action", C.c_int),
                        ("setpoint", C.c_char_p), ("setpoint_signal", C.c_char_p),
                        ("limit", C.c_char_p), ("dfilt", C.c_char_p), ("rate", C.c_char_p)]

        class Rig(C.Structure):
            _fields_ = [("board", C.c_char_p), ("fw", C.c_char_p), ("rig", C.c_char_p),
                        ("rate_hz", real), ("watchdog_ms", C.c_uint32),
                        ("params", C.POINTER(Param)), ("n_params", C.c_uint8),
                        ("signals", C.POINTER(Signal)), ("n_signals", C.c_uint8),
                        ("loops", C.POINTER(Loop)), ("n_loops", C.c_uint8),
                        ("command", C.c_char_p), ("simulated", C.c_uint8)]

        self.WRITE = C.CFUNCTYPE(C.c_size_t, C.c_void_p, C.POINTER(C.c_uint8), C.c_size_t)
        self.MICROS = C.CFUNCTYPE(C.c_uint32, C.c_void_p)
        self.READ = C.CFUNCTYPE(None, C.c_void_p)
        self.SET_OUT = C.CFUNCTYPE(None, C.c_void_p, real, C.c_int)
        self.NV_SAVE = C.CFUNCTYPE(C.c_int, C.c_void_p, C.POINTER(C.c_uint8), C.c_size_t)
        self.NV_LOAD = C.CFUNCTYPE(C.c_size_t, C.c_void_p, C.POINTER(C.c_uint8), C.c_size_t)
        self.PUSH = C.CFUNCTYPE(None, C.c_void_p, real, real)

        class Port(C.Structure):
            _fields_ = [("ctx", C.c_void_p), ("write", self.WRITE), ("micros", self.MICROS),
                        ("read_sensors", self.READ), ("set_output", self.SET_OUT),
                        ("nv_save", self.NV_SAVE), ("nv_load", self.NV_LOAD),
                        ("body_push", self.PUSH)]

        self.Param, self.Signal, self.Loop, self.Rig, self.Port = Param, Signal, Loop, Rig, Port


_REALS = {"double": C.c_double, "float": C.c_float}
_LIBS: dict[str, tuple] = {}


def lib(real: str = "double"):
    """The shared library of the ``real`` build with argument types set (built on first
    use), and its ctypes types."""
    if real not in _LIBS:
        t = _Types(_REALS[real])
        path = built().shared_lib if real == "double" else built().shared_lib_float
        so = C.CDLL(str(path))
        so.rb_board_size.restype = C.c_size_t
        so.rb_init.argtypes = [C.c_void_p, C.POINTER(t.Rig), C.POINTER(t.Port), C.c_int]
        so.rb_init.restype = C.c_int
        so.rb_decl_text.argtypes = [C.c_void_p]
        so.rb_decl_text.restype = C.c_char_p
        so.rb_rx_block.argtypes = [C.c_void_p, C.c_char_p, C.c_size_t]
        for name in ("rb_poll", "rb_step"):
            getattr(so, name).argtypes = [C.c_void_p]
        for name in ("rb_motor_word", "rb_fault_word", "rb_last_rx_error"):
            getattr(so, name).argtypes = [C.c_void_p]
            getattr(so, name).restype = C.c_char_p
        for name in ("rb_rx_errors", "rb_tx_drops"):
            getattr(so, name).argtypes = [C.c_void_p]
            getattr(so, name).restype = C.c_uint32
        so.rb_trip.argtypes = [C.c_void_p, C.c_char_p]
        so.rb_crc16.argtypes = [C.c_char_p, C.c_size_t]
        so.rb_crc16.restype = C.c_uint16
        so.rb_frame.argtypes = [C.c_char_p, C.c_size_t, C.c_char_p, C.c_size_t]
        so.rb_frame.restype = C.c_size_t
        so.rb_format_number.argtypes = [C.c_char_p, C.c_size_t, C.c_double, C.c_int]
        so.rb_format_number.restype = C.c_size_t
        so.rb_parse_number.argtypes = [C.c_char_p, C.c_size_t, C.POINTER(C.c_double)]
        so.rb_parse_number.restype = C.c_int
        _LIBS[real] = (so, t)
    return _LIBS[real][0]


def _b(text: str | None) -> bytes | None:
    return None if text is None else text.encode("ascii")


class CBoard:
    """The C library as a board for ``rig`` on ``plant`` (see the module docstring)."""

    def __init__(self, rig: RigDef, plant, *, state_path: str | None = None,
                 tx_capacity_bytes: int = 4096, clock_start_us: int = 0,
                 hand_tilt_deg: float = 0.0, board_name: str | None = None,
                 real: str = "double") -> None:
        if tx_capacity_bytes != 4096:
            raise ValueError("the C library's transmit buffer is RB_TX_SIZE (4096) bytes")
        self.lib = lib(real)
        T = _LIBS[real][1]
        size = C.sizeof(T.real)
        self.rig = rig
        self.plant = plant
        self.rate_hz = rig.rate_hz
        self.dt_s = 1.0 / rig.rate_hz
        self.hand_tilt_deg = hand_tilt_deg
        self.clock_start_us = int(clock_start_us) % U32
        self.instruments = rig.make_instruments(self.dt_s)
        self.state_path = state_path
        self._nv = b""
        if state_path is not None and Path(state_path).exists():
            self._nv = Path(state_path).read_bytes()
        self._keep = []
        P = rig.params
        self._values = (T.real * len(P))()
        self._params = (T.Param * len(P))(*[
            T.Param(_b(p.name), _b(p.unit), p.minimum, p.maximum,
                    C.cast(C.byref(self._values, i * size), T.real_p), int(p.writable))
            for i, p in enumerate(P)])
        S = rig.signals
        self._sig = (T.real * len(S))()
        self._sig_index = {s.name: i for i, s in enumerate(S)}
        self._signals = (T.Signal * len(S))(*[
            T.Signal(_b(s.name), _b(s.unit), C.cast(C.byref(self._sig, i * size), T.real_p))
            for i, s in enumerate(S)])
        loops = []
        for lp in rig.loops:
            loops.append(T.Loop(
                _b(lp.name), _b(lp.measure), _b(lp.output), *(_b(g) for g in lp.gains),
                ("stable", "integrating", "unstable").index(lp.plant),
                ("output", "integral").index(lp.relay),
                1 if lp.direct else 0,              # LoopDef.direct: e = sp - y (reverse)
                _b(lp.setpoint), _b(lp.setpoint_signal), _b(lp.limit), _b(lp.dfilt),
                _b(lp.rate)))
        self._loops = (T.Loop * len(loops))(*loops)
        self._rig = T.Rig(_b(board_name or rig.board.replace("sim-", "c-")), b"1.0.0",
                         _b(rig.rig), rig.rate_hz, int(rig.watchdog_ms), self._params,
                         len(P), self._signals, len(S), self._loops, len(loops),
                         _b(rig.command), 1)
        self._port = T.Port(None, T.WRITE(self._write), T.MICROS(self._micros),
                            T.READ(self._read_sensors), T.SET_OUT(self._set_output),
                            T.NV_SAVE(self._nv_save), T.NV_LOAD(self._nv_load),
                            T.PUSH(self._push) if hasattr(plant, "push") else T.PUSH())
        self._board = C.create_string_buffer(self.lib.rb_board_size())
        self._out = bytearray()
        self._room = 0
        self._pending_si = 0.0
        self._steps = 0
        self.boots = 0
        self._boot("power")

    # ------------------------------------------------------------------ port functions

    def _write(self, ctx, data, n):
        take = min(n, self._room)
        if take:
            self._out += C.string_at(data, take)
            self._room -= take
        return take

    def _micros(self, ctx):
        return self.time_us

    def _read_sensors(self, ctx):
        values = {p.name: self._values[i] for i, p in enumerate(self.rig.params)}
        for name, v in self.instruments.read(self.plant.sensors(), values).items():
            i = self._sig_index.get(name)
            if i is not None:
                self._sig[i] = v

    def _set_output(self, ctx, command, enabled):
        self._pending_si = command * self.rig.command_si if enabled else 0.0

    def _nv_save(self, ctx, data, n):
        self._nv = C.string_at(data, n)
        if self.state_path is not None:
            Path(self.state_path).write_bytes(self._nv)
        return 0

    def _nv_load(self, ctx, data, cap):
        n = min(len(self._nv), cap)
        C.memmove(data, self._nv, n)
        return n

    def _push(self, ctx, amp, time_s):
        self.plant.push(amp, time_s)

    # ------------------------------------------------------------------ SimBoard's interface

    # the board clock and the simulated hand are the simulation's, not the firmware's: the
    # same code as SimBoard's (it reads only _steps, _boot_step, clock_start_us, rate_hz,
    # plant and hand_tilt_deg)
    time_s = SimBoard.time_s
    time_us = SimBoard.time_us
    _hold_body = SimBoard._hold_body

    @property
    def motor(self) -> str:
        return self.lib.rb_motor_word(self._board).decode()

    @property
    def fault(self) -> str | None:
        word = self.lib.rb_fault_word(self._board).decode()
        return None if word == "none" else word

    @property
    def rx_err(self) -> int:
        return self.lib.rb_rx_errors(self._board)

    @property
    def drops(self) -> int:
        return self.lib.rb_tx_drops(self._board)

    @property
    def last_rx_error(self) -> str:
        return self.lib.rb_last_rx_error(self._board).decode()

    @property
    def signals(self) -> dict[str, float]:
        """The signal variables now (a copy, as SimBoard.signals is read by tests)."""
        return {s.name: self._sig[i] for i, s in enumerate(self.rig.signals)}

    @property
    def params(self) -> SimpleNamespace:
        """``params.values``: the parameter variables now (a copy)."""
        return SimpleNamespace(values={p.name: self._values[i]
                                       for i, p in enumerate(self.rig.params)})

    def param(self, name: str) -> float:
        return self._values[[p.name for p in self.rig.params].index(name)]

    def reboot(self, reason: str = "reset") -> None:
        self._boot(reason)

    def _boot(self, reason: str) -> None:
        self.boots += 1
        self._boot_step = self._steps
        for i, p in enumerate(self.rig.params):       # a restart runs the C start-up again
            self._values[i] = p.default
        self.instruments.reset()
        self._pending_si = 0.0
        code = self.lib.rb_init(self._board, C.byref(self._rig), C.byref(self._port),
                                0 if reason == "power" else 1)
        if code != 0:
            raise ValueError(f"rb_init refused the declaration: "
                             f"{self.lib.rb_decl_text(self._board).decode()}")

    def receive(self, data: bytes) -> None:
        """Host bytes in, as a receive interrupt and a main loop that keeps up would take
        them: pieces smaller than the receive ring (RB_RX_RING, 256), each polled."""
        for i in range(0, len(data), RX_PIECE):
            piece = data[i:i + RX_PIECE]
            self.lib.rb_rx_block(self._board, piece, len(piece))
            self.lib.rb_poll(self._board)

    def receive_unpolled(self, data: bytes) -> None:
        """Bytes into the receive ring with no rb_poll: a main loop that fell behind."""
        self.lib.rb_rx_block(self._board, data, len(data))

    def output(self, max_bytes: int | None = None) -> bytes:
        self._room = (1 << 30) if max_bytes is None else max_bytes
        self.lib.rb_poll(self._board)                 # flushes the library's buffer
        self._room = 0
        data, self._out = bytes(self._out), bytearray()
        return data

    def step(self, *, firmware: bool = True) -> None:
        if self.rig.held_upright and self.motor in ("off", "armed"):
            self._hold_body()
        self.plant.step(self._pending_si)
        self._steps += 1
        if firmware:
            self.lib.rb_step(self._board)


def make_c_board(rig: str = "balance", *, drive: str = "speed", num=(1.0,), den=(1.0, 1.0),
                 delay_s: float = 0.0, seed: int = 0, noise: float = 1.0,
                 rate_hz: float = 500.0, state_path: str | None = None,
                 plant_kind: str | None = None, **board_kw) -> CBoard:
    """``rigbench.rig.firmware.board.make_board`` with the C library as the firmware."""
    rd = rig_def(rig, drive=drive, num=num, den=den, delay_s=delay_s, rate_hz=rate_hz,
                 plant_kind=plant_kind)
    plant = rd.make_plant(np.random.default_rng(seed), noise, rate_hz)
    return CBoard(rd, plant, state_path=state_path, **board_kw)
