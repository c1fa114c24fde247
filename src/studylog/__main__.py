from studylog.cli.app import entry

entry()
