from commitadvisor.cli import main

main()
