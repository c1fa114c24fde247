from studylog.cli.app import run

run()
