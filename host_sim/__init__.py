# spinrail host side (CPython only): plant simulator, runners, reports, deploy, serial link,
# and the `spinrail` command line.
