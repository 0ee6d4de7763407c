"""The serial link to a board: COBS-framed messages with a CRC-16 and a sequence number, a host
session that streams a run and recovers from a faulty link, and a link that injects faults.

The wire format is described in ``PROTOCOL.md`` beside this file.
"""
