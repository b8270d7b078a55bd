#!/usr/bin/python3
"""Serve fixed Modbus registers with pymodbus, over TCP or RTU on a serial line, as an independent
peer for glowgate's tests.

The server is Debian's python3-pymodbus (written against 3.0.0); glowgate's own code plays no part
in it, so a test that reads these registers through glowgate's client checks that client against
a Modbus implementation written by other people.

Usage (run with /usr/bin/python3, the interpreter that has python3-pymodbus):

    pymodbus_server.py --port P [--host H] [--unit U] [--input SPEC] [--holding SPEC]
    pymodbus_server.py --port P [--host H] --spec FILE.json
    pymodbus_server.py --serial PATH [--baud N] [--parity N|E|O] [--stopbits 1|2] [register flags]

  --port P       Modbus TCP: port to listen on; 0 picks a free one (see the "listening" line below).
  --host H       address to bind, default 127.0.0.1.
  --serial PATH  Modbus RTU instead of TCP: serve on the serial device PATH, for example one end of
                 a pseudo-terminal pair made by
                     socat pty,raw,echo=0,link=A pty,raw,echo=0,link=B
                 (the client opens the other end). --port and --host are then not allowed.
  --baud N       RTU: baud rate, default 19200 (a pseudo-terminal ignores it).
  --parity P     RTU: N (none, default), E (even) or O (odd); pseudo-terminals refuse E and O.
  --stopbits S   RTU: 1 (default) or 2. Characters are always 8 data bits.
  --unit U       unit identifier (0..255) the --input/--holding registers belong to; default 1.
  --input SPEC   input registers (function 04), SPEC = ADDR=WORD[:WORD...][,ADDR=WORD...]
  --holding SPEC holding registers (function 03), same SPEC form.
                 ADDR is decimal or 0x-prefixed hex, the zero-based protocol address;
                 each WORD is a 16-bit hex value with or without 0x, consecutive words after ':'
                 go to ADDR+1, ADDR+2, ... Example: --input 100=42F6:E979,102=0x0001
  --stop-on-eof  also stop when standard input reaches end of file.
  --verbose      show pymodbus's own log on standard error (debug level).
  --spec FILE    JSON instead of the flags above, for several units:
                 {"units": [{"unit": 1,
                             "input":   {"100": ["42F6", "E979"], "102": 1},
                             "holding": {"0x10": "00FF"}}]}
                 keys are addresses (decimal or 0x hex), values a word or a list of words; a word
                 is an integer 0..65535 or a hex string.

Registers not listed are absent: reading them answers exception 02 (illegal data address). A request
to a unit not listed gets no answer at all (pymodbus 3.0 drops it), so the client times out.

On start it prints two lines on standard output and flushes them:
    listening 127.0.0.1:PORT        (RTU: listening serial PATH)
    ready
and then serves until SIGTERM or SIGINT, or until standard input reaches end of file when
--stop-on-eof is given (so a parent that dies cannot leave the server behind). Bad arguments
print a message naming the argument on standard error and exit with status 2; a port that cannot
be bound or a serial device that cannot be opened prints the reason and exits with status 1.
Over RTU, pymodbus 3.0 likewise leaves requests to units not listed unanswered.
"""

import argparse
import asyncio
import json
import logging
import os
import signal
import sys
import threading

from pymodbus.datastore import (
    ModbusServerContext,
    ModbusSlaveContext,
    ModbusSparseDataBlock,
)
from pymodbus.server import StartAsyncSerialServer, StartAsyncTcpServer
from pymodbus.transaction import ModbusRtuFramer


class SpecError(Exception):
    """A register specification that cannot be used."""


def parse_address(text, where):
    text = str(text).strip()
    try:
        addr = int(text, 16) if text.lower().startswith("0x") else int(text, 10)
    except ValueError:
        raise SpecError(f"{where}: address {text!r} is not a number") from None
    if not 0 <= addr <= 0xFFFF:
        raise SpecError(f"{where}: address {addr} outside 0..65535")
    return addr


def parse_word(value, where):
    if isinstance(value, bool):
        raise SpecError(f"{where}: word {value!r} is not a number")
    if isinstance(value, int):
        word = value
    else:
        text = str(value).strip()
        if text.lower().startswith("0x"):
            text = text[2:]
        try:
            word = int(text, 16)
        except ValueError:
            raise SpecError(f"{where}: word {value!r} is not hexadecimal") from None
    if not 0 <= word <= 0xFFFF:
        raise SpecError(f"{where}: word {value!r} outside 0..0xFFFF")
    return word


def put(registers, addr, words, where):
    for i, word in enumerate(words):
        a = addr + i
        if a > 0xFFFF:
            raise SpecError(f"{where}: words run past address 65535")
        registers[a] = word


def parse_cli_spec(text, flag):
    registers = {}
    for item in filter(None, (s.strip() for s in text.split(","))):
        where = f"{flag} {item!r}"
        if "=" not in item:
            raise SpecError(f"{where}: want ADDR=WORD[:WORD...]")
        addr_text, words_text = item.split("=", 1)
        addr = parse_address(addr_text, where)
        words = [parse_word(w, where) for w in words_text.split(":")]
        put(registers, addr, words, where)
    return registers


def parse_json_table(table, where):
    registers = {}
    if not isinstance(table, dict):
        raise SpecError(f"{where}: want an object of address: words")
    for key, value in table.items():
        w = f"{where}[{key!r}]"
        addr = parse_address(key, w)
        words = value if isinstance(value, list) else [value]
        put(registers, addr, [parse_word(v, w) for v in words], w)
    return registers


def parse_json_spec(path):
    try:
        with open(path, encoding="utf-8") as f:
            doc = json.load(f)
    except (OSError, ValueError) as exc:
        raise SpecError(f"--spec {path}: {exc}") from None
    units = doc.get("units") if isinstance(doc, dict) else None
    if not isinstance(units, list):
        raise SpecError(f"--spec {path}: want an object with a \"units\" list")
    result = {}
    for i, entry in enumerate(units):
        where = f"--spec {path}: units[{i}]"
        if not isinstance(entry, dict):
            raise SpecError(f"{where}: want an object")
        unknown = set(entry) - {"unit", "input", "holding"}
        if unknown:
            raise SpecError(f"{where}: unknown keys {sorted(unknown)}")
        unit = entry.get("unit", 1)
        if isinstance(unit, bool) or not isinstance(unit, int) or not 0 <= unit <= 255:
            raise SpecError(f"{where}.unit: want an integer 0..255")
        if unit in result:
            raise SpecError(f"{where}.unit: unit {unit} listed twice")
        result[unit] = (
            parse_json_table(entry.get("input", {}), f"{where}.input"),
            parse_json_table(entry.get("holding", {}), f"{where}.holding"),
        )
    return result


def build_context(units):
    slaves = {}
    for unit, (inputs, holding) in units.items():
        # zero_mode=True: protocol address N is datastore index N (pymodbus otherwise adds 1).
        slaves[unit] = ModbusSlaveContext(
            ir=ModbusSparseDataBlock(dict(inputs)),
            hr=ModbusSparseDataBlock(dict(holding)),
            zero_mode=True,
        )
    return ModbusServerContext(slaves=slaves, single=False)


async def start_tcp(host, port, context):
    server = await StartAsyncTcpServer(
        context=context, address=(host, port), defer_start=True, allow_reuse_address=True
    )
    task = asyncio.create_task(server.serve_forever())
    await server.serving
    bound = server.server.sockets[0].getsockname()
    return server, task, f"{bound[0]}:{bound[1]}"


async def start_rtu(path, baud, parity, stopbits, context):
    server = await StartAsyncSerialServer(
        context=context,
        framer=ModbusRtuFramer,
        defer_start=True,
        port=path,
        baudrate=baud,
        parity=parity,
        stopbits=stopbits,
        bytesize=8,
    )
    # start() opens the device; it raises when the device cannot be opened.
    await server.start()
    if server.transport is None:
        raise SpecError(f"--serial {path}: could not open the device")
    return server, None, f"serial {path}"


async def serve(start, stop_on_eof):
    server, task, where = await start
    print(f"listening {where}", flush=True)
    print("ready", flush=True)

    loop = asyncio.get_running_loop()
    stop = asyncio.Event()
    for sig in (signal.SIGTERM, signal.SIGINT):
        loop.add_signal_handler(sig, stop.set)
    if stop_on_eof:
        # A daemon thread, so that stopping by signal need not wait for it.
        # It reads the descriptor itself: a buffered reader's lock held by a
        # daemon thread aborts the interpreter at exit.
        def watch_stdin():
            while os.read(0, 4096):
                pass
            loop.call_soon_threadsafe(stop.set)

        threading.Thread(target=watch_stdin, daemon=True).start()
    await stop.wait()
    await server.shutdown()
    if task is not None:
        task.cancel()
        try:
            await task
        except asyncio.CancelledError:
            pass


def main(argv):
    p = argparse.ArgumentParser(description="Serve fixed Modbus registers with pymodbus.")
    p.add_argument("--port", type=int)
    p.add_argument("--host")
    p.add_argument("--serial")
    p.add_argument("--baud", type=int, default=19200)
    p.add_argument("--parity", default="N")
    p.add_argument("--stopbits", type=int, default=1)
    p.add_argument("--unit", type=int, default=1)
    p.add_argument("--input", default="")
    p.add_argument("--holding", default="")
    p.add_argument("--spec")
    p.add_argument("--stop-on-eof", action="store_true")
    p.add_argument("--verbose", action="store_true")
    args = p.parse_args(argv)
    # pymodbus logs every exception answer it sends at ERROR level; those are
    # expected here, so only --verbose shows its log.
    logging.getLogger("pymodbus").setLevel(logging.DEBUG if args.verbose else logging.CRITICAL)
    try:
        if args.serial is not None:
            if args.port is not None or args.host is not None:
                raise SpecError("--serial: give either --serial or --port/--host, not both")
            if args.baud <= 0:
                raise SpecError(f"--baud {args.baud}: must be positive")
            if args.parity not in ("N", "E", "O"):
                raise SpecError(f"--parity {args.parity!r}: want N, E or O")
            if args.stopbits not in (1, 2):
                raise SpecError(f"--stopbits {args.stopbits}: want 1 or 2")
        elif args.port is None:
            raise SpecError("--port: required unless --serial is given")
        elif not 0 <= args.port <= 65535:
            raise SpecError(f"--port {args.port}: outside 0..65535")
        if args.spec:
            if args.input or args.holding:
                raise SpecError("--spec: give either --spec or --input/--holding, not both")
            units = parse_json_spec(args.spec)
        else:
            if not 0 <= args.unit <= 255:
                raise SpecError(f"--unit {args.unit}: outside 0..255")
            units = {
                args.unit: (
                    parse_cli_spec(args.input, "--input"),
                    parse_cli_spec(args.holding, "--holding"),
                )
            }
    except SpecError as exc:
        print(f"pymodbus_server: {exc}", file=sys.stderr)
        return 2
    context = build_context(units)

    async def run():
        if args.serial is not None:
            start = start_rtu(args.serial, args.baud, args.parity, args.stopbits, context)
        else:
            start = start_tcp(args.host or "127.0.0.1", args.port, context)
        await serve(start, args.stop_on_eof)

    try:
        asyncio.run(run())
    except (SpecError, OSError) as exc:
        print(f"pymodbus_server: {exc}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
