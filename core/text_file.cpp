// The one reader of small text files (core/text_file.hpp): size checked before reading, errors
// naming the file and what it is.
#include "core/text_file.hpp"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>

#include "core/error.hpp"

namespace pb {

std::string read_text_file(const std::string& path, const std::string& what, uint64_t max_bytes) {
  const std::string name = what + " " + path;
  // O_NONBLOCK: opening a FIFO must not wait for a writer (it is refused below); no effect on files.
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC | O_NONBLOCK);
  if (fd < 0) {
    const int e = errno;
    throw InputError(name + (e == ENOENT ? " is missing" : std::string(" cannot be opened: ") + std::strerror(e)));
  }
  struct Closer {
    int fd;
    ~Closer() { ::close(fd); }
  } closer{fd};
  struct stat st {};
  if (::fstat(fd, &st) != 0) throw InputError(name + " cannot be read: " + std::strerror(errno));
  if (S_ISDIR(st.st_mode)) throw InputError(name + " is a folder, not a file");
  if (!S_ISREG(st.st_mode)) throw InputError(name + " is not a regular file");
  const uint64_t size = uint64_t(st.st_size);
  if (size > max_bytes)
    throw InputError(name + " has " + std::to_string(size) + " bytes, more than the " + std::to_string(max_bytes) +
                     " such a file may have (is it the right file?)");
  std::string text(size_t(size), '\0');
  size_t got = 0;
  while (got < text.size()) {
    const ssize_t n = ::read(fd, text.data() + got, text.size() - got);
    if (n < 0 && errno == EINTR) continue;
    if (n < 0) throw InputError(name + " cannot be read after " + std::to_string(got) + " bytes: " + std::strerror(errno));
    if (n == 0) break;
    got += size_t(n);
  }
  if (got != text.size())
    throw InputError(name + " ended after " + std::to_string(got) + " of its " + std::to_string(size) +
                     " bytes while being read (changed meanwhile?)");
  char extra;
  if (::read(fd, &extra, 1) > 0) throw InputError(name + " grew while being read (changed meanwhile?)");
  return text;
}

}  // namespace pb
