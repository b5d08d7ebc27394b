import sys

from eddyvigil.monitor.cli import main

sys.exit(main())
