from nutricap.cli.app import run_and_exit

run_and_exit()
