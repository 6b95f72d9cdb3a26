// Error hierarchy: every failure a user can act on is one of these, caught once in main.
#pragma once

#include <stdexcept>
#include <string>

namespace tidemark {

/// Documented process exit codes (README "Exit codes").
enum class ExitCode : int {
    ok = 0,
    input = 1,     ///< bad input data: FASTA, BED, profile, region string, missing file
    usage = 2,     ///< bad command line: unknown option, conflicting options
    io = 3,        ///< could not write an output (disk full, closed pipe, permissions)
    internal = 4,  ///< a bug: an invariant of tidemark itself failed
};

/// Base of all tidemark errors; what() is the complete message shown to the user.
class Error : public std::runtime_error {
public:
    using std::runtime_error::runtime_error;
    virtual ExitCode exit_code() const noexcept { return ExitCode::input; }
};

/// Malformed or unusable input data (sequence files, interval files, region strings).
class InputError : public Error {
public:
    using Error::Error;
};

/// A profile file that does not parse or does not validate.
class ProfileError : public Error {
public:
    using Error::Error;
};

/// Options that conflict or are out of range.
class UsageError : public Error {
public:
    using Error::Error;
    ExitCode exit_code() const noexcept override { return ExitCode::usage; }
};

/// Failure to write or finalise an output.
class IoError : public Error {
public:
    using Error::Error;
    ExitCode exit_code() const noexcept override { return ExitCode::io; }
};

/// A broken invariant inside tidemark (please report it).
class InternalError : public Error {
public:
    using Error::Error;
    ExitCode exit_code() const noexcept override { return ExitCode::internal; }
};

}  // namespace tidemark
