import sys

from hbmodel.cli.main import main

sys.exit(main())
