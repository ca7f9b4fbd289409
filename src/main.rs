//! The `dynode` binary: all of it is in [`dynode::cli`], so that the library's tests reach it.

fn main() {
    std::process::exit(dynode::cli::run(std::env::args_os()))
}
