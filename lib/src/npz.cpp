// .npz through libzip: it reads stored and deflated members and zip64 extra fields (numpy writes
// them even for tiny members), and checks each member's CRC while reading.
#include <zip.h>

#include <filesystem>
#include <memory>

#include "spinfer/atomic_file.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/npz.hpp"

namespace spinfer {
namespace {

std::string zip_message(int code) {
  zip_error_t e;
  zip_error_init_with_code(&e, code);
  std::string s = zip_error_strerror(&e);
  zip_error_fini(&e);
  return s;
}

struct ZipCloser {
  void operator()(zip_t* z) const { zip_discard(z); }
};
using ZipHandle = std::unique_ptr<zip_t, ZipCloser>;

ZipHandle open_archive(const std::string& path) {
  namespace fs = std::filesystem;
  std::error_code ec;
  if (!fs::exists(path, ec)) throw FileError(path + ": no such file");
  if (fs::is_directory(path, ec)) throw FileError(path + ": is a directory, not a file");
  if (fs::file_size(path, ec) == 0) throw InputError(path + ": empty file (not an .npz archive)");
  int code = 0;
  zip_t* z = zip_open(path.c_str(), ZIP_RDONLY | ZIP_CHECKCONS, &code);
  if (!z) throw FileError(path + ": cannot read as an .npz (ZIP) archive: " + zip_message(code));
  return ZipHandle(z);
}

std::string strip_npy(const std::string& name) {
  const std::string ext = ".npy";
  if (name.size() > ext.size() && name.compare(name.size() - ext.size(), ext.size(), ext) == 0)
    return name.substr(0, name.size() - ext.size());
  return name;
}

std::vector<std::string> member_names(zip_t* z) {
  std::vector<std::string> names;
  const zip_int64_t n = zip_get_num_entries(z, 0);
  for (zip_int64_t k = 0; k < n; ++k) {
    const char* name = zip_get_name(z, zip_uint64_t(k), 0);
    names.push_back(name ? strip_npy(name) : std::string());
  }
  return names;
}

std::string join(const std::vector<std::string>& v) {
  std::string s;
  for (const std::string& x : v) s += (s.empty() ? "" : ", ") + x;
  return s;
}

zip_uint64_t choose_member(const std::vector<std::string>& names, const std::string& member,
                           const std::string& path) {
  if (names.empty()) throw InputError(path + ": the .npz archive has no arrays");
  if (member.empty()) {
    if (names.size() == 1) return 0;
    throw InputError(path + ": the archive holds several arrays (" + join(names) +
                     "); choose one by name");
  }
  const std::string wanted = strip_npy(member);
  for (std::size_t k = 0; k < names.size(); ++k)
    if (names[k] == wanted) return k;
  throw InputError(path + ": no array named '" + wanted + "' in the archive (it holds " +
                   join(names) + ")");
}

std::string read_member_bytes(zip_t* z, zip_uint64_t index, const std::string& source) {
  zip_stat_t st;
  zip_stat_init(&st);
  if (zip_stat_index(z, index, 0, &st) != 0 || !(st.valid & ZIP_STAT_SIZE))
    throw FileError(source + ": cannot read the archive entry");
  std::unique_ptr<zip_file_t, int (*)(zip_file_t*)> f(zip_fopen_index(z, index, 0), zip_fclose);
  if (!f) throw FileError(source + ": cannot open the archive entry: " + zip_strerror(z));
  std::string bytes(std::size_t(st.size), '\0');
  zip_uint64_t done = 0;
  while (done < st.size) {
    const zip_int64_t got = zip_fread(f.get(), bytes.data() + done, st.size - done);
    if (got < 0)
      throw FileError(source + ": corrupt archive entry: " + zip_file_strerror(f.get()));
    if (got == 0) throw FileError(source + ": truncated archive entry");
    done += zip_uint64_t(got);
  }
  return bytes;
}

}  // namespace

std::vector<std::string> npz_members(const std::string& path) {
  return member_names(open_archive(path).get());
}

NpyArray read_npz_member(const std::string& path, const std::string& member) {
  ZipHandle z = open_archive(path);
  const std::vector<std::string> names = member_names(z.get());
  const zip_uint64_t index = choose_member(names, member, path);
  const std::string source = path + " (array '" + names[index] + "')";
  const std::string bytes = read_member_bytes(z.get(), index, source);
  return parse_npy(bytes.data(), bytes.size(), source);
}

namespace {

// Builds the archive in memory (libzip buffer source), so that the file itself is written in
// one atomic step.
std::string build_archive(const std::map<std::string, std::string>& members, bool compress) {
  zip_error_t err;
  zip_error_init(&err);
  zip_source_t* buffer = zip_source_buffer_create(nullptr, 0, 0, &err);
  if (!buffer) throw FileError("npz: cannot create an archive buffer");
  zip_t* z = zip_open_from_source(buffer, ZIP_TRUNCATE, &err);
  if (!z) {
    zip_source_free(buffer);
    throw FileError(std::string("npz: cannot create an archive: ") + zip_error_strerror(&err));
  }
  zip_source_keep(buffer);  // keep the bytes after zip_close
  std::unique_ptr<zip_source_t, void (*)(zip_source_t*)> keep(buffer, zip_source_free);
  for (const auto& [name, bytes] : members) {
    zip_source_t* s = zip_source_buffer(z, bytes.data(), bytes.size(), 0);
    const zip_int64_t idx = s ? zip_file_add(z, (name + ".npy").c_str(), s, ZIP_FL_ENC_UTF_8) : -1;
    if (idx < 0) {
      if (s) zip_source_free(s);
      const std::string msg = zip_strerror(z);
      zip_discard(z);
      throw FileError("npz: cannot add '" + name + "': " + msg);
    }
    zip_set_file_compression(z, zip_uint64_t(idx), compress ? ZIP_CM_DEFLATE : ZIP_CM_STORE, 0);
    zip_file_set_mtime(z, zip_uint64_t(idx), 315532800, 0);  // 1980-01-01: reproducible bytes
  }
  if (zip_close(z) != 0) {
    const std::string msg = zip_strerror(z);
    zip_discard(z);
    throw FileError("npz: cannot finish the archive: " + msg);
  }
  std::string out;
  if (zip_source_open(buffer) != 0) throw FileError("npz: cannot read back the archive");
  zip_source_seek(buffer, 0, SEEK_END);
  const zip_int64_t size = zip_source_tell(buffer);
  zip_source_seek(buffer, 0, SEEK_SET);
  out.resize(std::size_t(size < 0 ? 0 : size));
  const zip_int64_t got = zip_source_read(buffer, out.data(), out.size());
  zip_source_close(buffer);
  if (size < 0 || got != size) throw FileError("npz: cannot read back the archive");
  return out;
}

}  // namespace

void write_npz(const std::string& path, const std::map<std::string, NpyArray>& arrays,
               bool compress) {
  if (arrays.empty()) throw InputError(path + ": an .npz archive needs at least one array");
  std::map<std::string, std::string> members;
  for (const auto& [name, array] : arrays) {
    if (name.empty() || name.find('/') != std::string::npos)
      throw InputError(path + ": invalid array name '" + name + "'");
    members[name] = encode_npy(array);
  }
  const std::string archive = build_archive(members, compress);
  write_file_atomically(path, [&](std::ostream& out) {
    out.write(archive.data(), std::streamsize(archive.size()));
  });
}

}  // namespace spinfer
