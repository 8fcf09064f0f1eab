from gapforge.cli import main

main()
