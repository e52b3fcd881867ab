from tiltopt.cli import main

main()
