"""The bench: captured waveforms and what they prove.

Owns the capture readers (`vcd`, the common capture model in `capture`, the CSV reader in
`capture_csv`, the sample period a file implies in `resolution`, the live serial line protocol
in `serial_stream`, oscilloscope exports in volts in `scope` and `scope_csv`) and the
measurement of every gap and overlap (`measure`). Imports only base. Never imports analog, timer, stage, pipeline, outputs or cli: a
capture is judged against numbers handed in, not against a design it reads itself.
"""
