from hashaudit.cli import run

run()
