from attrib.cli import main

main()
