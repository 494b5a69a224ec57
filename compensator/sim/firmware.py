"""The firmware in the loop: the integer table path and the fixed-point cooler PID, for many units at once.

Two interchangeable back ends run exactly the generated firmware's arithmetic:

* :class:`PythonFirmware` evaluates the bit-exact Python references of
  :mod:`compensator.firmware`: the table's :meth:`~compensator.firmware.tables.LookupTable.lookup`
  once for every ADC code (then a gather per tick), the measured drop
  correction by :meth:`~compensator.firmware.tables.CurrentCorrection.delta`,
  and :class:`VectorPid`, the :class:`~compensator.firmware.pid.FixedPid`
  algorithm on int64 arrays (one controller per unit);
* :class:`CompiledFirmware` calls the generated C (table and PID) compiled
  into a shared library with the C compiler, through ctypes.

Both add the gain trim of the ``gain_trimmed`` strategy the same way: an
integer number of DAC codes added after the table (and the drop
correction), clamped to the table's output clamp; a sensor fault keeps the
safe DAC code untrimmed.
"""

from __future__ import annotations

import ctypes
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from compensator.errors import CompensatorError, ModelError
from compensator.firmware.pid import INPUT_LIMIT_COUNT, INT32_MAX, INT32_MIN, FixedPidCoefficients
from compensator.firmware.tables import STATUS_SENSOR_FAULT, LookupTable

__all__ = [
    "VectorPid", "PythonFirmware", "CompiledFirmware", "FirmwareBuildError", "TABLE_NAME", "PID_NAME",
    "render_firmware_sources", "build_firmware_library",
]

TABLE_NAME = "bias_dac_from_adc"
PID_NAME = "cooler_pid"
HARNESS_NAME = "sim_harness.c"
LIBRARY_NAME = "libcompensator_firmware.so"


class FirmwareBuildError(CompensatorError, OSError):
    """The generated C could not be compiled into a shared library (no compiler, or a compiler error)."""


def _sat32(x):
    return np.clip(x, INT32_MIN, INT32_MAX)


class VectorPid:
    """:class:`~compensator.firmware.pid.FixedPid` for ``count`` controllers at once (automatic mode only).

    The same integer operations as the scalar reference, on int64 arrays;
    every product stays below 2^63 by the coefficient bounds, so the result
    is bit for bit the scalar one (a test compares them).

    Parameters
    ----------
    coeffs : FixedPidCoefficients
    count : int
        Number of controllers.
    """

    def __init__(self, coeffs: FixedPidCoefficients, count: int):
        if not isinstance(coeffs, FixedPidCoefficients):
            raise ModelError(f"coeffs: need FixedPidCoefficients, got {type(coeffs).__name__}", key="coeffs")
        self.coeffs = coeffs
        self.count = int(count)
        self.reset()

    def reset(self, output_count=None) -> None:
        """Clear every controller; with ``output_count`` the first step outputs it (bumpless start).

        Parameters
        ----------
        output_count : int or array_like, optional
            Counts, clipped to the limits.
        """
        c = self.coeffs
        z = np.zeros(self.count, dtype=np.int64)
        self._i, self._d, self._y_prev = z.copy(), z.copy(), z.copy()
        self._primed = False
        if output_count is None:
            self._u = z.copy()
            self._have_output = False
        else:
            out = np.broadcast_to(np.asarray(output_count, dtype=np.int64), (self.count,))
            self._u = np.clip(out, c.out_min_count, c.out_max_count) << c.state_frac_bits
            self._have_output = True

    @property
    def output_count(self) -> np.ndarray:
        """The last outputs in counts."""
        f = self.coeffs.state_frac_bits
        return (self._u + ((1 << f) >> 1)) >> f

    def step(self, setpoint_count, measurement_count) -> np.ndarray:
        """Advance every controller one sample period.

        Parameters
        ----------
        setpoint_count, measurement_count : array_like of int
            Input counts, broadcast to ``(count,)``.

        Returns
        -------
        ndarray of int64
            Output counts.
        """
        c = self.coeffs
        half = lambda s: (1 << (s - 1)) if s else 0  # noqa: E731
        f = c.state_frac_bits
        lim = INPUT_LIMIT_COUNT
        r = np.clip(np.broadcast_to(np.asarray(setpoint_count, dtype=np.int64), (self.count,)), -lim, lim)
        y = np.clip(np.broadcast_to(np.asarray(measurement_count, dtype=np.int64), (self.count,)), -lim, lim)
        y_prev = self._y_prev if self._primed else y
        p = (c.kpb_mant * r - c.kp_mant * y + half(c.p_shift)) >> c.p_shift
        d = ((c.ad_mant * self._d + half(c.ad_shift)) >> c.ad_shift) - ((c.bd_mant * (y - y_prev) + half(c.bd_shift))
                                                                       >> c.bd_shift)
        d = _sat32(d)
        u_prev = self._u
        i = self._i
        if not self._primed and self._have_output:
            i = _sat32(u_prev - p - d)
        v = _sat32(p + i + d)
        u = np.clip(v, c.out_min_count << f, c.out_max_count << f)
        if c.rate_step_q and self._have_output:
            u = np.clip(u, u_prev - c.rate_step_q, u_prev + c.rate_step_q)
        inc = (c.ki_mant * (r - y) + half(c.ki_shift)) >> c.ki_shift
        mode = c.anti_windup_code
        if mode == 0:
            i = _sat32(i + inc + ((c.track_mant * (u - v) + half(c.track_shift)) >> c.track_shift))
        elif mode == 1:
            hold = ((v > u) & (inc > 0)) | ((v < u) & (inc < 0))
            i = np.where(hold, i, _sat32(i + inc))
        else:
            i = _sat32(i + inc)
        self._i, self._d, self._u, self._y_prev = i, d, u, y
        self._primed = True
        self._have_output = True
        return (u + half(f)) >> f


def _apply_trim(table: LookupTable, dac, status, trim_codes):
    if trim_codes is None:
        return dac
    trimmed = np.clip(dac + trim_codes, table.dac_min, table.dac_max)
    return np.where(status == STATUS_SENSOR_FAULT, table.safe_dac_code, trimmed)


class PythonFirmware:
    """The firmware's integer path by its Python references.

    Parameters
    ----------
    table : LookupTable
    pid : FixedPidCoefficients or None
        The cooler controller (needed by :meth:`pid`).
    """

    name = "python"

    def __init__(self, table: LookupTable, pid: FixedPidCoefficients | None = None):
        self.table = table
        self.pid_coeffs = pid
        codes = np.arange((1 << table.adc_bits), dtype=np.int64)
        self._dac, self._status = table.lookup(codes)

    def lookup(self, adc_code, current_code=None, trim_codes=None):
        """DAC code and status for raw ADC codes (with the measured drop correction and a trim).

        Parameters
        ----------
        adc_code : array_like of int
            Temperature ADC codes within the ADC's range.
        current_code : array_like of int, optional
            Current ADC codes (tables with the measured drop correction only).
        trim_codes : array_like of int, optional
            DAC codes added after the table (gain trim), broadcast.

        Returns
        -------
        dac_code, status : ndarray of int64
        """
        t = self.table
        dac = self._dac[adc_code]
        status = self._status[adc_code]
        if current_code is not None and t.current is not None:
            dac = np.where(status == STATUS_SENSOR_FAULT, t.safe_dac_code,
                           np.clip(dac + t.current.delta(current_code), t.dac_min, t.dac_max))
        return _apply_trim(t, dac, status, trim_codes), status

    def pid(self, count: int):
        """A bank of ``count`` cooler controllers (:class:`VectorPid`)."""
        if self.pid_coeffs is None:
            raise ModelError("no cooler controller in this firmware", key="pid")
        return VectorPid(self.pid_coeffs, count)


def render_firmware_sources(table: LookupTable, pid: FixedPidCoefficients | None, profiles=(),
                            settings: dict | None = None) -> dict:
    """The generated C of the table and the cooler PID, plus a small harness that loops over units.

    The harness is not firmware: it only calls the generated functions over
    arrays so one ctypes call serves every unit of a tick.

    Parameters
    ----------
    table : LookupTable
    pid : FixedPidCoefficients or None
    profiles : sequence
        Profiles named in the banners.
    settings : dict, optional
        Written into the banners.

    Returns
    -------
    dict
        File name -> text, deterministic.
    """
    from compensator.firmware.pid_c import render_pid_c
    from compensator.firmware.table_c import render_table_c

    files = dict(render_table_c(table, profiles, name=TABLE_NAME, settings=settings))
    ct = f"uint{table.code_type_bits}_t"
    lines = [
        "/* Simulation harness (not firmware): loops the generated functions over arrays for ctypes. */",
        "#include <stddef.h>", "#include <stdint.h>", f'#include "{TABLE_NAME}.h"',
    ]
    if pid is not None:
        files.update(render_pid_c(pid, name=PID_NAME, profiles=profiles, settings=settings))
        lines.append(f'#include "{PID_NAME}.h"')
    lines += [
        "void sim_table_many(const int64_t *adc, int64_t *dac, int64_t *status, int64_t n);",
        "void sim_table_many(const int64_t *adc, int64_t *dac, int64_t *status, int64_t n) {",
        "    for (int64_t i = 0; i < n; ++i) {",
        f"        dac[i] = (int64_t){TABLE_NAME}(({ct})adc[i]);",
        f"        status[i] = (int64_t){TABLE_NAME}_status(({ct})adc[i]);",
        "    }",
        "}",
    ]
    if table.current is not None:
        it = f"uint{table.current.current_type_bits}_t"
        lines += [
            "void sim_table_current_many(const int64_t *adc, const int64_t *cur, int64_t *dac, int64_t n);",
            "void sim_table_current_many(const int64_t *adc, const int64_t *cur, int64_t *dac, int64_t n) {",
            "    for (int64_t i = 0; i < n; ++i) {",
            f"        dac[i] = (int64_t){TABLE_NAME}_with_current(({ct})adc[i], ({it})cur[i]);",
            "    }",
            "}",
        ]
    if pid is not None:
        st = f"{PID_NAME}_state_t"
        lines += [
            "int64_t sim_pid_state_size(void);",
            f"int64_t sim_pid_state_size(void) {{ return (int64_t)sizeof({st}); }}",
            "void sim_pid_init_many(void *states, int64_t n);",
            "void sim_pid_init_many(void *states, int64_t n) {",
            f"    for (int64_t i = 0; i < n; ++i) {{ {PID_NAME}_init(&(({st} *)states)[i]); }}",
            "}",
            "void sim_pid_init_at_many(void *states, const int64_t *out, int64_t n);",
            "void sim_pid_init_at_many(void *states, const int64_t *out, int64_t n) {",
            f"    for (int64_t i = 0; i < n; ++i) {{ {PID_NAME}_init_at(&(({st} *)states)[i], (int32_t)out[i]); }}",
            "}",
            "void sim_pid_step_many(void *states, const int64_t *sp, const int64_t *meas, int64_t *out, int64_t n);",
            "void sim_pid_step_many(void *states, const int64_t *sp, const int64_t *meas, int64_t *out, int64_t n) {",
            "    for (int64_t i = 0; i < n; ++i) {",
            f"        out[i] = (int64_t){PID_NAME}_step(&(({st} *)states)[i], (int32_t)sp[i], (int32_t)meas[i]);",
            "    }",
            "}",
        ]
    files[HARNESS_NAME] = "\n".join(lines) + "\n"
    return files


def build_firmware_library(directory, *, compiler: str | None = None) -> Path:
    """Compile every ``.c`` file in ``directory`` into a shared library there.

    Parameters
    ----------
    directory : str or path-like
        Holds the generated C and the harness (:func:`render_firmware_sources`).
    compiler : str, optional
        The C compiler (default: ``cc`` on the PATH).

    Returns
    -------
    Path
        The shared library.

    Raises
    ------
    FirmwareBuildError
        No compiler, or the compilation failed (its first error line is quoted).
    """
    directory = Path(directory)
    cc = compiler or shutil.which("cc")
    if not cc:
        raise FirmwareBuildError("no C compiler (cc) on the PATH: --firmware needs one")
    sources = sorted(str(p) for p in directory.glob("*.c"))
    lib = directory / LIBRARY_NAME
    tmp = directory / f".{LIBRARY_NAME}.tmp"
    cmd = [cc, "-std=c99", "-O2", "-Wall", "-Wextra", "-Werror", "-shared", "-fPIC", "-o", str(tmp), *sources]
    try:
        done = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    except (OSError, subprocess.TimeoutExpired) as exc:
        raise FirmwareBuildError(f"cannot run the C compiler {cc}: {exc}") from None
    if done.returncode != 0:
        first = next((ln for ln in done.stderr.splitlines() if "error" in ln), done.stderr.strip()[:200])
        tmp.unlink(missing_ok=True)
        raise FirmwareBuildError(f"compiling the generated C in {directory} failed: {first}")
    tmp.replace(lib)
    return lib


_I64P = np.ctypeslib.ndpointer(dtype=np.int64, flags="C_CONTIGUOUS")


@dataclass
class _CPidBank:
    lib: ctypes.CDLL
    states: ctypes.Array
    count: int

    def reset(self, output_count=None) -> None:
        if output_count is None:
            self.lib.sim_pid_init_many(self.states, self.count)
        else:
            out = np.ascontiguousarray(np.broadcast_to(np.asarray(output_count, dtype=np.int64), (self.count,)))
            self.lib.sim_pid_init_at_many(self.states, out, self.count)

    def step(self, setpoint_count, measurement_count) -> np.ndarray:
        sp = np.ascontiguousarray(np.broadcast_to(np.asarray(setpoint_count, dtype=np.int64), (self.count,)))
        y = np.ascontiguousarray(np.broadcast_to(np.asarray(measurement_count, dtype=np.int64), (self.count,)))
        out = np.empty(self.count, dtype=np.int64)
        self.lib.sim_pid_step_many(self.states, sp, y, out, self.count)
        return out


class CompiledFirmware:
    """The generated C, compiled into a shared library, called through ctypes.

    Parameters
    ----------
    table : LookupTable
        The table the C was generated from (for its constants: clamp, safe code).
    library : str or path-like
        From :func:`build_firmware_library`.
    has_pid : bool
        Whether the library holds the cooler PID.
    """

    name = "compiled C"

    def __init__(self, table: LookupTable, library, has_pid: bool):
        self.table = table
        self.library = Path(library)
        self._lib = ctypes.CDLL(str(self.library))
        self._lib.sim_table_many.argtypes = [_I64P, _I64P, _I64P, ctypes.c_int64]
        self._lib.sim_table_many.restype = None
        if table.current is not None:
            self._lib.sim_table_current_many.argtypes = [_I64P, _I64P, _I64P, ctypes.c_int64]
            self._lib.sim_table_current_many.restype = None
        self._has_pid = has_pid
        if has_pid:
            self._lib.sim_pid_state_size.restype = ctypes.c_int64
            self._lib.sim_pid_init_many.argtypes = [ctypes.c_void_p, ctypes.c_int64]
            self._lib.sim_pid_init_at_many.argtypes = [ctypes.c_void_p, _I64P, ctypes.c_int64]
            self._lib.sim_pid_step_many.argtypes = [ctypes.c_void_p, _I64P, _I64P, _I64P, ctypes.c_int64]
            for fn in ("sim_pid_init_many", "sim_pid_init_at_many", "sim_pid_step_many"):
                getattr(self._lib, fn).restype = None

    def lookup(self, adc_code, current_code=None, trim_codes=None):
        """As :meth:`PythonFirmware.lookup`, by the compiled C.

        Parameters
        ----------
        adc_code : array_like of int
        current_code : array_like of int, optional
        trim_codes : array_like of int, optional

        Returns
        -------
        dac_code, status : ndarray of int64
        """
        adc = np.asarray(adc_code, dtype=np.int64)
        flat = np.ascontiguousarray(adc.ravel())
        dac = np.empty_like(flat)
        status = np.empty_like(flat)
        self._lib.sim_table_many(flat, dac, status, flat.size)
        if current_code is not None and self.table.current is not None:
            cur = np.ascontiguousarray(np.broadcast_to(np.asarray(current_code, dtype=np.int64), adc.shape).ravel())
            self._lib.sim_table_current_many(flat, cur, dac, flat.size)
        dac, status = dac.reshape(adc.shape), status.reshape(adc.shape)
        return _apply_trim(self.table, dac, status, trim_codes), status

    def pid(self, count: int):
        """A bank of ``count`` compiled cooler controllers."""
        if not self._has_pid:
            raise ModelError("no cooler controller in this firmware", key="pid")
        size = int(self._lib.sim_pid_state_size())
        states = (ctypes.c_uint8 * (size * count))()
        bank = _CPidBank(self._lib, states, count)
        bank.reset()
        return bank
