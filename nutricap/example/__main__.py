import sys
from pathlib import Path

from nutricap.example.landscape import write_example_landscape

if len(sys.argv) != 2:
    sys.exit("usage: python -m nutricap.example FOLDER")
print(write_example_landscape(Path(sys.argv[1])))
