"""The command line: parse, call one core operation, render. No logic lives here."""
