"""Drive the simulated SCPI dosimeter with a third-party SCPI client.

Run by TestSCPIConformancePyVISA (drivers/benchsim/conformance_test.go)
with the meter's pseudo-terminal as the first argument. PyVISA with its
pure-Python backend (ResourceManager("@py"), pyvisa-py's ASRL resource over
pyserial) is the client: nothing here is the project's own code. Each check
names the clause of IEEE 488.2-1992 or SCPI 1999.0 it follows (from memory
of the published texts). Prints one line per check and exits 1 on the
first failure.
"""
import sys
import time

import pyvisa

checks = 0


def check(what, got, want):
    global checks
    checks += 1
    if got != want:
        print(f"FAIL {what}: got {got!r}, want {want!r}")
        sys.exit(1)
    print(f"ok   {what}: {got!r}")


def wait_for(inst, cond):
    """Polls the bytes waiting in the client's input buffer until cond."""
    for _ in range(1000):
        if cond(inst.bytes_in_buffer):
            return
        time.sleep(0.005)
    print(f"FAIL waiting: {inst.bytes_in_buffer} bytes in the input buffer")
    sys.exit(1)


def main():
    device = sys.argv[1]
    rm = pyvisa.ResourceManager("@py")
    inst = rm.open_resource(
        f"ASRL{device}::INSTR",
        baud_rate=19200,
        data_bits=8,
        read_termination="\n",
        write_termination="\n",
        timeout=3000,
    )
    # 488.2 11.5.1.1: PON is set at power on; *ESR? reads and clears.
    check("*ESR? at power on (PON, bit 7)", inst.query("*ESR?"), "128")
    check("*ESR? after reading it", inst.query("*ESR?"), "0")
    # 488.2 10.14: four fields.
    idn = inst.query("*IDN?").split(",")
    check("*IDN? has four fields", len(idn), 4)
    check("*IDN? maker and model", idn[:2], ["ONDRAKEL", "DX-2"])
    inst.write("*RST")
    inst.write("*CLS")
    # 488.2 10.18, 10.19, 10.38, 10.39: the mandatory common commands.
    check("*OPC?", inst.query("*OPC?"), "1")
    check("*TST? (0: self-test passed)", inst.query("*TST?"), "0")
    inst.write("*WAI")
    inst.write("*OPC")
    check("*ESR? after *OPC (bit 0)", inst.query("*ESR?"), "1")
    inst.write("*ESE 36")
    check("*ESE?", inst.query("*ESE?"), "36")
    inst.write("*SRE 48")
    check("*SRE?", inst.query("*SRE?"), "48")
    check("*STB? with nothing to report", inst.query("*STB?"), "0")
    # SCPI Vol. 2, 21.8: the error queue, first in first out.
    inst.write("NOSUCH:HEADER")
    inst.write("*RST 5")
    inst.write("UNIT:KRAT")
    # 488.2 11.2: bit 2 (error queue), ESB (CME is enabled by *ESE 36)
    # and MSS (ESB is enabled by *SRE 48): 4 + 32 + 64.
    check("*STB? with errors queued", inst.query("*STB?"), "100")
    check("SYST:ERR? first: -113", inst.query("SYST:ERR?"), '-113,"Undefined header"')
    check("SYST:ERR:NEXT? second: -108 parameter not allowed", inst.query("SYST:ERR:NEXT?"), '-108,"Parameter not allowed"')
    check("SYSTem:ERRor:NEXT? third: -109 missing parameter", inst.query("SYSTem:ERRor:NEXT?"), '-109,"Missing parameter"')
    check("SYST:ERR? empty", inst.query("SYST:ERR?"), '0,"No error"')
    inst.write("*CLS")
    # 488.2 8.4.1: the replies of one message come back as one response
    # message, joined by ';'.
    joined = inst.query("*IDN?;*OPC?")
    check("two queries in one message", joined.split(";")[1:], ["1"])
    check("unit and error in one message", inst.query("UNIT:KRAT?;:SYST:ERR?"), 'UGY/S;0,"No error"')
    # SCPI Vol. 1, 7.2.1: a reading is a number (NR3 here).
    values = inst.query_ascii_values("READ?")
    check("READ? is one number", len(values), 1)
    inst.query("SYST:ERR?")  # READ? may queue -222 (out of range)
    inst.write("*CLS")
    # 488.2 6.3.2.3: a new message while a reply is unread interrupts it.
    # Wait (on events, not for a time) until the reply is waiting unread,
    # then until the meter has taken the new query and thrown it away.
    inst.write("*IDN?")
    wait_for(inst, lambda n: n >= len("ONDRAKEL,DX-2,"))
    inst.write("*OPC?")
    wait_for(inst, lambda n: n == len("1\n"))
    check("after an interrupted query, the new reply only", inst.read(), "1")
    check("-410 query interrupted", inst.query("SYST:ERR?"), '-410,"Query INTERRUPTED"')
    # A command longer than the input buffer is reported, not lost.
    inst.write("UNIT:KRAT " + "X" * 300)
    check("-363 for an over-long command", inst.query("SYST:ERR?"), '-363,"Input buffer overrun"')
    inst.close()
    rm.close()
    print(f"PASS {checks} checks")


if __name__ == "__main__":
    main()
