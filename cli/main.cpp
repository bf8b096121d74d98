// `spinfer`: the command-line front end. Parses arguments, runs one subcommand, maps library
// exceptions to the documented exit codes. All numerical work happens in the library.
#include <iostream>

#include "checkpoint.hpp"
#include "commands.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/version.hpp"

int main(int argc, char** argv) {
  using namespace spinfer::cli;
  CLI::App app{"spinfer: pairwise maximum-entropy (inverse Ising) networks from binary recordings"};
  app.require_subcommand(1);
  app.set_version_flag("--version", [] {
    return "spinfer " + spinfer::version() + "\n" + spinfer::build_info();
  });
  Context ctx;
  ctx.argv.assign(argv, argv + argc);
  add_stats_command(app, ctx);
  add_bin_command(app, ctx);
  add_convert_command(app, ctx);
  add_fit_command(app, ctx);
  add_sample_command(app, ctx);
  add_check_command(app, ctx);
  add_scan_command(app, ctx);
  add_refine_command(app, ctx);
  add_significance_command(app, ctx);
  add_merge_command(app, ctx);
  add_report_command(app, ctx);

  try {
    app.parse(argc, argv);
  } catch (const CLI::CallForHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForAllHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForVersion& e) {
    return app.exit(e);
  } catch (const CLI::ParseError& e) {
    app.exit(e);
    return kUsage;  // CLI11 uses its own codes; we promise 2 for every usage error
  }
  try {
    return ctx.run ? ctx.run() : kUsage;
  } catch (const spinfer::InputError& e) {
    std::cerr << "spinfer: error: " << e.what() << std::endl;
    return kBadInput;
  } catch (const spinfer::FileError& e) {
    std::cerr << "spinfer: error: " << e.what() << std::endl;
    return kFileError;
  } catch (const spinfer::NumericalError& e) {
    std::cerr << "spinfer: numerical failure: " << e.what() << std::endl;
    return kNumerical;
  } catch (const spinfer::Interrupted& e) {
    return exit_after_interruption(e.what());  // 128 + signal
  } catch (const std::exception& e) {
    std::cerr << "spinfer: internal error: " << e.what() << std::endl;
    return kFailure;
  }
}
