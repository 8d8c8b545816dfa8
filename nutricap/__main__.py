from nutricap.cli import run_and_exit

run_and_exit()
