from snnconvert.cli import entry

if __name__ == "__main__":  # a spawned worker process imports this module too: it must not run the CLI
    entry()
