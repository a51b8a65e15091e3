from noiselab.cli.app import main

main()
