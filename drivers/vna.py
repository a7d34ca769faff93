"""SCPI VNA driver: settings, one triggered sweep, S-parameters as a skrf.Network.

Command words come from a dialect file (:mod:`probelog.drivers.dialect`); the generic one
(``drivers/dialects/generic-vna.toml``) is what the simulated bench speaks.

One sweep: (``set_ports``) -> ``trigger_single`` -> ``wait_complete`` (``*OPC?``,
with a timeout stretched to the expected sweep time) -> ``fetch_sparams`` as an
IEEE 488.2 REAL,64 block (byte order from the dialect) -> (``fetch_frequencies``)
-> Network with 50 ohm ports. After settings are sent each is read back
(``query_*``; :mod:`probelog.drivers.readback`) and a difference refuses the sweep
(:class:`~probelog.drivers.errors.SettingMismatch`). A contact pre-check
(:meth:`ScpiVna.precheck_sweep`) sweeps a few points at a wide IF bandwidth,
then restores the plan's settings and reads them back. The error queue is read after every operation; any
entry raises :class:`~probelog.drivers.errors.InstrumentError` quoting the instrument.

If the instrument rejects ``format_binary`` (an error-queue entry) the driver
falls back to ``format_ascii``; a data reply that does not start with ``#`` is
parsed as comma-separated ASCII numbers in any case.

Errors (all in :mod:`probelog.drivers.errors`): InstrumentTimeout, ConnectionLost,
InstrumentUnreachable, MalformedBlock / ShortBlock, InstrumentError,
PowerLimitError (raised before anything is sent), SettingMismatch. After a transport error call
:meth:`ScpiVna.reopen`; the settings last applied are sent again.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import skrf

from probelog.drivers.dialect import Dialect, load_dialect
from probelog.drivers.errors import DriverError, InstrumentError, PowerLimitError, ReplyError, SettingMismatch
from probelog.drivers.readback import SETTINGS as READBACK
from probelog.drivers.readback import changed_fields, fmt, parse_number, same
from probelog.drivers.visa import Link, LinkSettings, open_resource
from probelog.bench import SweepSettings

Z0_OHM = 50.0


def check_power(settings: SweepSettings, power_limit_dbm: float) -> None:
    """Raise :class:`PowerLimitError` when the requested power exceeds the limit (dBm)."""
    if not np.isfinite(settings.power_dbm) or settings.power_dbm > power_limit_dbm:
        raise PowerLimitError(
            f"source power {settings.power_dbm:g} dBm is above the plan's limit of "
            f"{power_limit_dbm:g} dBm; nothing was sent to the VNA"
        )


def check_settings(settings: SweepSettings) -> None:
    """Raise ValueError for a sweep the driver cannot ask for."""
    if not (0 < settings.start_hz < settings.stop_hz):
        raise ValueError(f"sweep needs 0 < start_hz < stop_hz, got {settings.start_hz:g} .. {settings.stop_hz:g} Hz")
    if settings.points < 2:
        raise ValueError(f"sweep needs at least 2 points, got {settings.points}")
    if not settings.ifbw_hz > 0:
        raise ValueError(f"IF bandwidth must be > 0 Hz, got {settings.ifbw_hz:g}")


def sparams_from_values(values: np.ndarray, n_freq: int, order: list[str]) -> np.ndarray:
    """Flat float64 [re, im per parameter per point] -> S of shape (n_freq, p, p).

    ``order`` lists the parameter names ("S11", "S21", ...) in reply order.
    """
    n_par = len(order)
    expected = n_freq * n_par * 2
    if values.size != expected:
        raise ReplyError(
            f"S-parameter data has {values.size} values, expected {expected} "
            f"({n_freq} points x {n_par} parameters x re/im)"
        )
    z = values.reshape(n_freq, n_par, 2)
    c = z[..., 0] + 1j * z[..., 1]
    ports = int(round(np.sqrt(n_par)))
    s = np.empty((n_freq, ports, ports), dtype=complex)
    for k, name in enumerate(order):
        s[:, int(name[1]) - 1, int(name[2]) - 1] = c[:, k]
    return s


class ScpiVna:
    """A VNA reached through VISA, speaking a dialect file's commands.

    ``resource`` is a VISA resource string, ``backend`` a pyvisa backend ("@py",
    "@ivi", "@sim" or "file.yaml@sim"), ``dialect`` a name in drivers/dialects or
    a path. ``timeout_ms`` overrides the dialect's I/O timeout. Opening queries
    the identity, so a wrong address fails here with InstrumentUnreachable.
    """

    def __init__(
        self,
        resource: str,
        *,
        backend: str | None = "@py",
        dialect: str | Path | Dialect = "generic-vna",
        timeout_ms: int | None = None,
    ) -> None:
        self.dialect = dialect if isinstance(dialect, Dialect) else load_dialect(dialect, "vna")
        d = self.dialect
        self._link_settings = LinkSettings(d.read_termination, d.write_termination, timeout_ms or d.timeout_ms)
        self.link: Link = open_resource(
            resource, backend, self._link_settings, error_query=d.commands["next_error"]
        )
        self.resource = self.link.resource
        self.settings: SweepSettings | None = None
        self._power_limit_dbm: float | None = None
        # stimulus (Hz) of each settings swept since the last configure: the plan's
        # and the pre-check's, each fetched once
        self._freqs: dict[SweepSettings, np.ndarray] = {}
        self._last: SweepSettings | None = None  # settings of the last sweep
        self._ports: int | None = None  # port set last sent with set_ports
        self.ascii_data = False
        try:
            self.idn = self.identify()
        except Exception:
            self.link.close()
            raise

    # -- protocol

    def identify(self) -> str:
        """The instrument's identity string (``*IDN?`` in the generic dialect)."""
        return self.link.query(self.dialect.command("identify"))

    def reset(self) -> None:
        """Reset to the instrument's defaults and clear its status and error queue."""
        self.link.command(self.dialect.command("reset"))
        if self.dialect.has("clear_status"):
            self.link.command(self.dialect.command("clear_status"))
        self._wait_complete()
        self.settings = None
        self._freqs.clear()
        self._last = None
        self._ports = None

    def configure(self, settings: SweepSettings, power_limit_dbm: float) -> None:
        """Apply a linear sweep (Hz, points, IF bandwidth Hz, power dBm), then read
        every setting back.

        The power check happens before any command is sent. A setting the
        instrument reads back differently (clamped, rounded, ignored) raises
        :class:`~probelog.drivers.errors.SettingMismatch` and leaves the VNA unconfigured:
        :meth:`sweep` refuses until a configure succeeds.
        """
        check_power(settings, power_limit_dbm)
        check_settings(settings)
        self.settings = None  # nothing is swept until the read-back agrees
        self._freqs.clear()
        self._last = None
        self._ports = None
        self._apply(settings, None)
        self._set_data_format()
        self._read_back(settings, power_limit_dbm, set(changed_fields(None, settings)))
        self.settings = settings
        self._power_limit_dbm = power_limit_dbm

    def sweep(self, ports: int = 2) -> skrf.Network:
        """Trigger one sweep, wait for it, fetch S for ``ports`` (1 or 2) ports."""
        if ports not in (1, 2):
            raise ValueError(f"ports must be 1 or 2, got {ports}")
        if self.settings is None:
            raise DriverError(f"{self.resource}: configure() the VNA before the first sweep", resource=self.resource)
        return self._acquire(self.settings, ports)

    def precheck_sweep(self, settings: SweepSettings, ports: int = 2) -> skrf.Network:
        """A short contact pre-check sweep with ``settings`` (few points, wide IF
        bandwidth), then the configured settings restored and all read back.

        Only the settings that differ are sent, each way, and read back (the
        power too before the short sweep) before anything is swept with them. The plan's power limit of the last
        :meth:`configure` applies. On any error the VNA counts as unconfigured.
        """
        if ports not in (1, 2):
            raise ValueError(f"ports must be 1 or 2, got {ports}")
        base, limit = self.settings, self._power_limit_dbm
        if base is None or limit is None:
            raise DriverError(f"{self.resource}: configure() the VNA before the first sweep", resource=self.resource)
        check_power(settings, limit)
        check_settings(settings)
        self.settings = None  # neither the plan's nor verified until read back
        self._apply(settings, base)
        # what changed, and the power always: a level changed at the instrument is caught here
        self._read_back(settings, limit, set(changed_fields(base, settings)) | {"power_dbm"})
        net = self._acquire(settings, ports)
        self._apply(base, settings)
        self._read_back(base, limit, set(changed_fields(settings, base)))  # restored exactly
        self.settings = base
        return net

    def switch_terms(self) -> tuple[skrf.Network, skrf.Network] | None:
        """Switch terms (gamma_f = a2/b2, gamma_r = a1/b1) of the last 2-port sweep as
        two 1-port Networks, or None when the dialect has no ``fetch_switch_terms``.
        Measure them on a thru (any reciprocal 2-port works); they belong to the
        instrument, not the DUT."""
        d = self.dialect
        if not d.has("fetch_switch_terms") or self.settings is None:
            return None
        cmd = d.command("fetch_switch_terms")
        values = self.link.query_values(cmd, d.byte_order)
        self.link.check_errors(cmd)
        last = self._last or self.settings
        f = self._freqs.get(last)
        if f is None:
            f = self._frequencies(last)
        if values.size != 4 * f.size:
            raise ReplyError(f"{self.resource}: {cmd!r} returned {values.size} numbers, expected {4 * f.size} "
                             f"(2 complex per point for {f.size} points)", resource=self.resource)
        pairs = values.reshape(f.size, 2, 2)
        g = pairs[..., 0] + 1j * pairs[..., 1]
        freq = skrf.Frequency.from_f(f, unit="Hz")
        return (skrf.Network(frequency=freq, s=g[:, 0].reshape(-1, 1, 1), name="gamma_f"),
                skrf.Network(frequency=freq, s=g[:, 1].reshape(-1, 1, 1), name="gamma_r"))

    def close(self) -> None:
        self.link.close()

    def reopen(self) -> None:
        """Open the connection again (after a timeout or a drop) and re-apply settings."""
        self.link.reopen()
        self._freqs.clear()
        self._last = None
        self._ports = None
        self.idn = self.identify()
        if self.settings is not None and self._power_limit_dbm is not None:
            self.configure(self.settings, self._power_limit_dbm)

    # -- helpers

    def _apply(self, settings: SweepSettings, previous: SweepSettings | None) -> None:
        """Send the settings that differ from ``previous`` (all when None)."""
        d, link = self.dialect, self.link
        values = {"start_hz": ("set_start_hz", "hz"), "stop_hz": ("set_stop_hz", "hz"), "points": ("set_points", "n"),
                  "ifbw_hz": ("set_ifbw_hz", "hz"), "power_dbm": ("set_power_dbm", "dbm")}
        for name in changed_fields(previous, settings):
            op, key = values[name]
            link.command(d.command(op, **{key: getattr(settings, name)}))

    def _read_back(self, settings: SweepSettings, power_limit_dbm: float, fields: set[str]) -> None:
        """Ask the instrument for the SweepSettings ``fields`` (those the dialect can
        query; one error-queue check for the batch); raise SettingMismatch on a difference."""
        d, link = self.dialect, self.link
        asked_for = [(st, d.command(st.operation)) for st in READBACK if st.field in fields and d.has(st.operation)]
        replies = [(st, cmd, link.query(cmd)) for st, cmd in asked_for]  # query_ifbw_hz is optional
        if replies:
            link.check_errors(" / ".join(cmd for _, cmd in asked_for))
        for st, cmd, reply in replies:
            got = parse_number(reply)
            if got is None:
                raise ReplyError(f"{self.resource}: {cmd!r} answered {reply!r}, expected one number "
                                 f"({st.unit})", resource=self.resource)
            asked = float(getattr(settings, st.field))
            if st.field == "power_dbm" and got > power_limit_dbm:
                raise SettingMismatch(
                    f"{self.resource}: the VNA reads back a source power of {fmt(got, st.unit)} ({cmd!r}), above "
                    f"the plan's limit of {fmt(power_limit_dbm, st.unit)} (asked {fmt(asked, st.unit)}); not "
                    "sweeping. The port may be sourcing it now: switch RF off at the instrument and follow "
                    "your lab's rules before landing again", setting=st.name, asked=asked, got=got,
                    unit=st.unit, resource=self.resource)
            if not same(st.field, asked, got):
                raise SettingMismatch(
                    f"{self.resource}: asked for {st.name} {fmt(asked, st.unit)}, the VNA reads back "
                    f"{fmt(got, st.unit)} ({cmd!r}); not sweeping with a setting the instrument clamped, "
                    "rounded or ignored (choose a value it supports, or check its dialect file)",
                    setting=st.name, asked=asked, got=got, unit=st.unit, resource=self.resource)

    def _acquire(self, settings: SweepSettings, ports: int) -> skrf.Network:
        """Trigger, wait, fetch one sweep that the instrument runs with ``settings``."""
        d, link = self.dialect, self.link
        if d.has("set_ports") and self._ports != ports:
            link.command(d.command("set_ports", ports=",".join(str(p) for p in range(1, ports + 1))))
            self._ports = ports
        trigger = d.command("trigger_single")
        link.write(trigger)  # its errors are read with the *OPC? below
        self._wait_complete(self._sweep_timeout_ms(settings, ports), after=trigger)
        order = d.data_order[ports]
        fetch = d.command("fetch_sparams")
        values = link.query_values(fetch, d.byte_order)
        link.check_errors(fetch)
        f = self._freqs.get(settings)
        if f is None:  # the stimulus changes only with the settings
            f = self._freqs[settings] = self._frequencies(settings)
        self._last = settings
        s = sparams_from_values(values, f.size, order)
        return skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=s, z0=Z0_OHM, name="sweep")

    def _wait_complete(self, timeout_ms: int | None = None, after: str | None = None) -> None:
        cmd = self.dialect.command("wait_complete")
        reply = self.link.query(cmd, timeout_ms=timeout_ms)
        if reply.strip() not in ("1", "+1"):
            raise ReplyError(f"{self.resource}: {cmd!r} answered {reply!r}, expected 1", resource=self.resource)
        self.link.check_errors(after or cmd)

    def _sweep_timeout_ms(self, settings: SweepSettings, ports: int) -> int:
        # Rough sweep time: points / IFBW per receiver pass, one pass per driven port,
        # doubled for retrace and settling; never below the I/O timeout.
        est_ms = 2.0 * ports * settings.points / settings.ifbw_hz * 1000.0
        return int(max(self._link_settings.timeout_ms, self._link_settings.timeout_ms + est_ms))

    def _set_data_format(self) -> None:
        d, link = self.dialect, self.link
        self.ascii_data = False
        if d.has("format_binary"):
            try:
                link.command(d.command("format_binary"))
            except InstrumentError:
                if not d.has("format_ascii"):
                    raise
                self.ascii_data = True
        elif d.has("format_ascii"):
            self.ascii_data = True
        if self.ascii_data:
            link.command(d.command("format_ascii"))
            return
        op = f"byte_order_{d.byte_order}"
        if d.has(op):
            link.command(d.command(op))

    def _frequencies(self, s: SweepSettings) -> np.ndarray:
        if self.dialect.has("fetch_frequencies"):
            cmd = self.dialect.command("fetch_frequencies")
            f = self.link.query_values(cmd, self.dialect.byte_order)
            self.link.check_errors(cmd)
            if f.size < 2 or np.any(np.diff(f) <= 0):
                raise ReplyError(f"{self.resource}: {cmd!r} returned {f.size} frequencies that do not increase")
            return f
        return np.linspace(s.start_hz, s.stop_hz, s.points)


if TYPE_CHECKING:  # ScpiVna is a probelog.bench.Vna, every member (checked by mypy, costs nothing at run time)
    from probelog.bench import Vna

    def _scpi_vna_is_a_vna(vna: ScpiVna) -> Vna:
        return vna
