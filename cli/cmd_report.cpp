// `spinfer report`: the HTML report is drawn by the Python package (matplotlib), so this
// subcommand hands its arguments to `python3 -m spinfer report` (SPINFER_PYTHON overrides the
// interpreter; by default the python3 beside this command, else python3 on PATH). All options
// are passed through unchanged.
#include <unistd.h>

#include <cerrno>
#include <cstdlib>
#include <cstring>
#include <iostream>

#include "commands.hpp"

namespace spinfer::cli {

void add_report_command(CLI::App& app, Context& ctx) {
  CLI::App* sub = app.add_subcommand(
      "report", "Write one self-contained HTML report (needs the Python package: pip install .)");
  sub->allow_extras();
  sub->prefix_command();
  sub->set_help_flag();  // --help is answered by the Python side
  sub->footer(
      "Options: MODEL.json [--check CHECK.json] [--scan SCAN.json] [--truth TRUE.json] --out R.html\n\n"
      "Example:\n  spinfer report model.json --check check.json --out report.html\n");
  sub->callback([&ctx, sub] {
    ctx.run = [sub] {
      // SPINFER_PYTHON, else the python3 installed beside this command (pip puts both in one
      // scripts folder, e.g. a virtual environment's bin/), else python3 from PATH.
      const char* py = std::getenv("SPINFER_PYTHON");
      std::string python = py && *py ? py : "python3";
      if (!(py && *py)) {
        char self[4096];
        const ssize_t n = ::readlink("/proc/self/exe", self, sizeof self - 1);
        if (n > 0) {
          std::string dir(self, std::size_t(n));
          dir = dir.substr(0, dir.find_last_of('/'));
          if (::access((dir + "/python3").c_str(), X_OK) == 0) python = dir + "/python3";
        }
      }
      std::vector<std::string> args = {python, "-m", "spinfer", "report"};
      for (const auto& r : sub->remaining()) args.push_back(r);
      std::vector<char*> cargs;
      for (auto& a : args) cargs.push_back(a.data());
      cargs.push_back(nullptr);
      ::execvp(cargs[0], cargs.data());
      std::cerr << "spinfer: error: cannot run " << python << " (" << std::strerror(errno)
                << "); the report needs the Python package" << std::endl;
      return int(kFileError);
    };
  });
}

}  // namespace spinfer::cli
