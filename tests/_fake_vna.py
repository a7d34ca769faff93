"""A VNA speaking the generic dialect over TCP on 127.0.0.1, able to misbehave on
purpose (tests/test_vna_driver.py, tests/test_vna_readback.py)."""

from __future__ import annotations

import socket
import threading
import time
from typing import Callable

import numpy as np
import skrf

from probelog.drivers.blocks import encode_block

TIMEOUT_MS = 300


class FakeVnaServer:
    """A VNA speaking the generic dialect over TCP, able to misbehave on purpose.

    ``mode`` changes how the S-parameter block is sent: "ok", "close-mid-block",
    "short-block", "garbled-header", "long-block", "slow-opc". ``network`` is the
    skrf.Network (1 or 2 ports) it serves. Threads are daemons, every socket has
    a timeout, and stop() (or the fixture) ends them.
    """

    def __init__(self, network: skrf.Network):
        self.network = network
        self.mode = "ok"
        # settings as the instrument holds them, answered by the read-back queries;
        # filters[header](asked) -> what the instrument keeps (clamping, rounding or
        # ignoring a value without an error, as some instruments do)
        self.state = {"SENSe:FREQuency:STARt": 10e6, "SENSe:FREQuency:STOP": 67e9, "SENSe:SWEep:POINts": 201,
                      "SENSe:BANDwidth": 1e3, "SOURce:POWer": -10.0}
        self.filters: dict[str, Callable[[float], float]] = {}
        self.log: list[str] = []
        self.errors: list[str] = []
        self.little = True
        self._stop = threading.Event()
        self._srv = socket.create_server(("127.0.0.1", 0))
        self._srv.settimeout(0.05)
        self.port = self._srv.getsockname()[1]
        self.resource = f"TCPIP::127.0.0.1::{self.port}::SOCKET"
        self._threads = [threading.Thread(target=self._accept, daemon=True)]
        self._threads[0].start()

    def stop(self) -> None:
        self._stop.set()
        for t in self._threads:
            t.join(timeout=2)
        self._srv.close()

    def _accept(self) -> None:
        while not self._stop.is_set():
            try:
                conn, _ = self._srv.accept()
            except socket.timeout:
                continue
            t = threading.Thread(target=self._serve, args=(conn,), daemon=True)
            self._threads.append(t)
            t.start()

    def _serve(self, conn: socket.socket) -> None:
        conn.settimeout(0.05)
        buf = b""
        with conn:
            while not self._stop.is_set():
                try:
                    chunk = conn.recv(65536)
                except socket.timeout:
                    continue
                except OSError:
                    return
                if not chunk:
                    return
                buf += chunk
                while b"\n" in buf:
                    line, buf = buf.split(b"\n", 1)
                    try:
                        if not self._handle(conn, line.decode().strip()):
                            return
                    except OSError:
                        return

    def _values(self, data: np.ndarray) -> bytes:
        return np.asarray(data, dtype="<f8" if self.little else ">f8").tobytes()

    def _handle(self, conn: socket.socket, cmd: str) -> bool:
        self.log.append(cmd)
        net = self.network
        if cmd == "*IDN?":
            conn.sendall(b"QF-Labs,FakeVNA,SN0042,0.1\n")
        elif cmd == "*OPC?":
            if self.mode == "slow-opc":
                time.sleep(3 * TIMEOUT_MS / 1000)
            conn.sendall(b"1\n")
        elif cmd == "SYSTem:ERRor:NEXT?":
            conn.sendall((self.errors.pop(0) if self.errors else '0,"No error"').encode() + b"\n")
        elif cmd.startswith("SOURce:POWer ") and float(cmd.split()[1]) > 10 and not self.filters:
            self.errors.append('-222,"Data out of range; source power above +10 dBm"')
        elif cmd.endswith("?") and cmd[:-1] in self.state:
            conn.sendall(f"{self.state[cmd[:-1]]:+.11E}".encode() + b"\n")
        elif cmd.split(" ")[0] in self.state:
            header, value = cmd.split(" ")[0], float(cmd.split(" ")[1])
            self.state[header] = self.filters.get(header, lambda v: v)(value)
        elif cmd == "FORMat:BORDer SWAPped":
            self.little = True
        elif cmd == "FORMat:BORDer NORMal":
            self.little = False
        elif cmd == "TRACe:DATA? STIMulus":
            conn.sendall(encode_block(self._values(net.f)) + b"\n")
        elif cmd == "TRACe:DATA? SPARameters":
            order = [(0, 0)] if net.nports == 1 else [(0, 0), (1, 0), (0, 1), (1, 1)]
            cols = np.stack([net.s[:, i, j] for i, j in order], axis=1)
            flat = np.stack([cols.real, cols.imag], axis=-1).ravel()
            block = encode_block(self._values(flat))
            if self.mode == "close-mid-block":
                conn.sendall(block[: len(block) // 2])
                return False
            if self.mode == "short-block":
                conn.sendall(block[: len(block) // 2] + b"\n")
            elif self.mode == "garbled-header":
                conn.sendall(b"#4x" + block[3:] + b"\n")
            elif self.mode == "long-block":
                conn.sendall(block + b"\x00" * 8 + b"\n")
            else:
                conn.sendall(block + b"\n")
        elif cmd.split(" ")[0] in {
            "*RST", "*CLS", "SENSe:FREQuency:STARt", "SENSe:FREQuency:STOP", "SENSe:SWEep:POINts",
            "SENSe:BANDwidth", "SENSe:SWEep:PORTs", "INITiate:IMMediate", "FORMat:DATA",
        }:
            pass
        else:
            self.errors.append(f'-113,"Undefined header; {cmd}"')
        return True


def reference_network(points: int = 201) -> skrf.Network:
    """An asymmetric 2-port: series 20 ohm then shunt 100 fF, from skrf's media."""
    freq = skrf.Frequency(1, 67, points, unit="GHz")
    media = skrf.media.DefinedGammaZ0(freq, z0_port=50, z0=50)
    return media.resistor(20.0) ** media.shunt_capacitor(100e-15)
