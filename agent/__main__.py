import sys

from rotorwatch.cli import main

sys.exit(main())
