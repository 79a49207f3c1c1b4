# The one error type the command line catches: it prints "spinrail: <message>" and exits with
# exit_code (2: bad input, the default).


class UserError(Exception):
    exit_code = 2

    def __init__(self, message, exit_code=2):
        super().__init__(message)
        self.exit_code = exit_code
