#!/usr/bin/python3
"""Reads registers from a Modbus RTU slave on a serial device with Debian's
python3-pymodbus (ModbusSerialClient, RTU framer), an independent
implementation of the protocol, for the bus/sim RTU server tests.

    /usr/bin/python3 read_pymodbus_rtu.py DEVICE BAUD UNIT input|holding ADDRESS COUNT

Parity none: pseudo-terminals refuse even and odd parity. Prints one JSON
object: {"registers": [...]} with the register values, or {"exception": CODE}
when the slave answers with a Modbus exception.
"""
import json
import sys

from pymodbus.client import ModbusSerialClient
from pymodbus.framer.rtu_framer import ModbusRtuFramer


def main():
    device, baud, unit, table, address, count = sys.argv[1:]
    client = ModbusSerialClient(
        device, framer=ModbusRtuFramer, baudrate=int(baud), parity="N", stopbits=1, bytesize=8, timeout=3
    )
    if not client.connect():
        sys.exit("cannot open %s" % device)
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
