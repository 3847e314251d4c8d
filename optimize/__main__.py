from ampfront.optimize.cli import main

main()
