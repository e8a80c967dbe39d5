"""Invented scenarios for the simulator (fictional insurers and regions), with their pricing specs."""
