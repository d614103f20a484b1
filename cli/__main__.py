from nodecast.cli.app import main

main()
