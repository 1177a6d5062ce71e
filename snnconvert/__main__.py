from snnconvert.cli import entry

entry()
