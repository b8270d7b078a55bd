#!/usr/bin/python3
"""Reads registers from a Modbus TCP server with Debian's python3-pymodbus, an
independent implementation of the protocol, for the bus/sim server tests.

    /usr/bin/python3 read_pymodbus.py HOST PORT UNIT input|holding ADDRESS COUNT

Prints one JSON object: {"registers": [...]} with the register values, or
{"exception": CODE} when the server answers with a Modbus exception.
"""
import json
import sys

from pymodbus.client import ModbusTcpClient


def main():
    host, port, unit, table, address, count = sys.argv[1:]
    client = ModbusTcpClient(host, port=int(port), timeout=5)
    if not client.connect():
        sys.exit("cannot connect to %s:%s" % (host, port))
    try:
        read = client.read_input_registers if table == "input" else client.read_holding_registers
        rr = read(int(address), int(count), slave=int(unit))
        if rr.isError():
            code = getattr(rr, "exception_code", None)
            if code is None:
                sys.exit("read failed: %s" % rr)
            print(json.dumps({"exception": code}))
        else:
            print(json.dumps({"registers": list(rr.registers)}))
    finally:
        client.close()


main()
