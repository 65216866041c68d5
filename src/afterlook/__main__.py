from afterlook.cli.main import entry

entry()
