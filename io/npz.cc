#include "io/npz.h"

#include <zlib.h>

#include <algorithm>
#include <cstdio>
#include <cstring>
#include <string_view>
#include <unordered_set>
#include <utility>

#include "base/status_macros.h"
#include "io/atomic_file.h"
#include "io/bytes.h"
#include "io/npy.h"

namespace sprig::io {

namespace {

// Record signatures and fixed sizes (APPNOTE.TXT sections 4.3.7, 4.3.12, 4.3.14-4.3.16).
constexpr uint32_t kLocalHeaderSignature = 0x04034b50;
constexpr uint32_t kCentralHeaderSignature = 0x02014b50;
constexpr uint32_t kEndSignature = 0x06054b50;
constexpr uint32_t kZip64EndSignature = 0x06064b50;
constexpr uint32_t kZip64LocatorSignature = 0x07064b50;
constexpr uint64_t kLocalHeaderSize = 30;
constexpr uint64_t kCentralHeaderSize = 46;
constexpr uint64_t kEndSize = 22;
constexpr uint64_t kZip64EndSize = 56;
constexpr uint64_t kZip64LocatorSize = 20;
constexpr uint16_t kZip64ExtraId = 0x0001;
constexpr uint16_t kFlagEncrypted = 0x0001;
constexpr uint16_t kFlagStrongEncryption = 0x0040;
constexpr uint16_t kFlagUtf8 = 0x0800;
constexpr uint16_t kMethodStored = 0;
constexpr uint16_t kMethodDeflate = 8;

// Deflate cannot expand data by more than about 1032:1, so a member claiming more than this
// is lying about its size; refusing it stops a small file from demanding a huge buffer.
constexpr uint64_t kMaxDeflateRatio = 1024;
constexpr uint64_t kDeflateSlack = uint64_t{1} << 20;

// zlib counts in 32-bit units; larger buffers are fed in pieces of this size.
constexpr uint64_t kZlibChunk = uint64_t{1} << 30;

std::string MemberWhere(const std::string& path, const std::string& member) {
  return path + ", member '" + member + "'";
}

// ---------------------------------------------------------------------------------------------
// Reading.

struct EndRecord {
  uint64_t entries = 0;
  uint64_t directory_size = 0;
  uint64_t directory_offset = 0;
};

// The end-of-central-directory record is the last 22 bytes plus an optional comment of up to
// 64 KiB, so it is searched for backwards; a candidate counts only if its comment length ends
// exactly at the end of the file.
Result<uint64_t> FindEndRecord(const MappedFile& file, const std::string& path) {
  const uint8_t* d = file.data();
  const uint64_t size = file.size();
  if (size >= kEndSize) {
    const uint64_t lowest = size - kEndSize > 0xffff ? size - kEndSize - 0xffff : 0;
    for (uint64_t p = size - kEndSize + 1; p-- > lowest;) {
      if (LoadLE32(d + p) == kEndSignature && p + kEndSize + LoadLE16(d + p + 20) == size) {
        return p;
      }
    }
  }
  return Status::Corruption(path +
                            " is truncated or not a valid .npz: its zip end-of-central-directory "
                            "record is missing");
}

Result<EndRecord> ReadEndRecord(const MappedFile& file, const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(uint64_t p, FindEndRecord(file, path));
  const uint8_t* d = file.data();
  const uint8_t* e = d + p;
  if (LoadLE16(e + 4) != 0 || LoadLE16(e + 6) != 0 || LoadLE16(e + 8) != LoadLE16(e + 10)) {
    return Status::NotSupported(path + " is a multi-disk zip archive, which is not supported");
  }
  EndRecord end;
  end.entries = LoadLE16(e + 10);
  end.directory_size = LoadLE32(e + 12);
  end.directory_offset = LoadLE32(e + 16);
  // A ZIP64 locator just before the end record points at the ZIP64 end record, whose 64-bit
  // fields replace the 16/32-bit ones above (which then hold 0xffff/0xffffffff markers).
  if (p >= kZip64LocatorSize && LoadLE32(d + p - kZip64LocatorSize) == kZip64LocatorSignature) {
    const uint8_t* locator = d + p - kZip64LocatorSize;
    const uint64_t offset = LoadLE64(locator + 8);
    if (LoadLE32(locator + 4) != 0 || LoadLE32(locator + 16) > 1) {
      return Status::NotSupported(path + " is a multi-disk zip archive, which is not supported");
    }
    if (!RangeWithin(offset, kZip64EndSize, p - kZip64LocatorSize) ||
        LoadLE32(d + offset) != kZip64EndSignature) {
      return Status::Corruption(path + " has a ZIP64 end record locator that points at offset " +
                                std::to_string(offset) + ", where there is no ZIP64 end record");
    }
    const uint8_t* z = d + offset;
    if (LoadLE32(z + 16) != 0 || LoadLE32(z + 20) != 0 || LoadLE64(z + 24) != LoadLE64(z + 32)) {
      return Status::NotSupported(path + " is a multi-disk zip archive, which is not supported");
    }
    end.entries = LoadLE64(z + 32);
    end.directory_size = LoadLE64(z + 40);
    end.directory_offset = LoadLE64(z + 48);
  }
  if (!RangeWithin(end.directory_offset, end.directory_size, p)) {
    return Status::Corruption(path + " is truncated or corrupt: its zip central directory (" +
                              std::to_string(end.directory_size) + " bytes at offset " +
                              std::to_string(end.directory_offset) +
                              ") does not lie within the file");
  }
  // Each entry takes at least 46 bytes, which bounds a forged count before any allocation.
  if (end.entries > end.directory_size / kCentralHeaderSize) {
    return Status::Corruption(path + " is corrupt: its zip end record claims " +
                              std::to_string(end.entries) + " members, more than its " +
                              std::to_string(end.directory_size) +
                              "-byte central directory can hold");
  }
  return end;
}

// Replaces 0xffffffff markers in `member` with the values of a ZIP64 extra field, in the order
// the specification fixes: uncompressed size, compressed size, local header offset.
Status ApplyZip64Extra(const uint8_t* extra, uint64_t extra_size, const std::string& where,
                       ZipMember* member) {
  const bool need_uncompressed = member->uncompressed_size == 0xffffffff;
  const bool need_compressed = member->compressed_size == 0xffffffff;
  const bool need_offset = member->local_header_offset == 0xffffffff;
  if (!need_uncompressed && !need_compressed && !need_offset) return Status::Ok();
  uint64_t pos = 0;
  while (pos + 4 <= extra_size) {
    const uint16_t id = LoadLE16(extra + pos);
    const uint16_t length = LoadLE16(extra + pos + 2);
    pos += 4;
    if (length > extra_size - pos) break;
    if (id == kZip64ExtraId) {
      const uint8_t* field = extra + pos;
      uint64_t left = length;
      auto take = [&](uint64_t* value) {
        if (left < 8) return false;
        *value = LoadLE64(field);
        field += 8;
        left -= 8;
        return true;
      };
      if ((need_uncompressed && !take(&member->uncompressed_size)) ||
          (need_compressed && !take(&member->compressed_size)) ||
          (need_offset && !take(&member->local_header_offset))) {
        return Status::Corruption(where + " has a ZIP64 extra field too short for its sizes");
      }
      return Status::Ok();
    }
    pos += length;
  }
  return Status::Corruption(where + " has 32-bit size markers but no ZIP64 extra field");
}

}  // namespace

Result<std::vector<ZipMember>> ReadZipDirectory(const MappedFile& file, const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(EndRecord end, ReadEndRecord(file, path));
  const uint8_t* d = file.data() + end.directory_offset;
  const uint64_t size = end.directory_size;
  std::vector<ZipMember> members;
  members.reserve(end.entries);
  uint64_t pos = 0;
  for (uint64_t i = 0; i < end.entries; ++i) {
    if (!RangeWithin(pos, kCentralHeaderSize, size) ||
        LoadLE32(d + pos) != kCentralHeaderSignature) {
      return Status::Corruption(path + " is corrupt: zip central directory entry " +
                                std::to_string(i) + " is missing or damaged");
    }
    const uint8_t* h = d + pos;
    const uint64_t name_length = LoadLE16(h + 28);
    const uint64_t extra_length = LoadLE16(h + 30);
    const uint64_t comment_length = LoadLE16(h + 32);
    const uint64_t entry_size = kCentralHeaderSize + name_length + extra_length + comment_length;
    if (!RangeWithin(pos, entry_size, size)) {
      return Status::Corruption(path + " is corrupt: zip central directory entry " +
                                std::to_string(i) + " runs past the end of the directory");
    }
    ZipMember m;
    m.name.assign(reinterpret_cast<const char*>(h + kCentralHeaderSize), name_length);
    m.flags = LoadLE16(h + 8);
    m.method = LoadLE16(h + 10);
    m.crc32 = LoadLE32(h + 16);
    m.compressed_size = LoadLE32(h + 20);
    m.uncompressed_size = LoadLE32(h + 24);
    m.local_header_offset = LoadLE32(h + 42);
    const std::string where = MemberWhere(path, m.name);
    if (LoadLE16(h + 34) != 0 && LoadLE16(h + 34) != 0xffff) {
      return Status::NotSupported(where + " lies on another disk of a multi-disk archive");
    }
    SPRIG_RETURN_IF_ERROR(
        ApplyZip64Extra(h + kCentralHeaderSize + name_length, extra_length, where, &m));
    members.push_back(std::move(m));
    pos += entry_size;
  }
  return members;
}

namespace {

// Locates a member's data after its local header, checking that everything lies in the file.
Result<uint64_t> MemberDataOffset(const MappedFile& file, const ZipMember& m,
                                  const std::string& where) {
  const uint8_t* d = file.data();
  if (!RangeWithin(m.local_header_offset, kLocalHeaderSize, file.size()) ||
      LoadLE32(d + m.local_header_offset) != kLocalHeaderSignature) {
    return Status::Corruption(where + " is corrupt: no zip local header at offset " +
                              std::to_string(m.local_header_offset));
  }
  const uint8_t* h = d + m.local_header_offset;
  const uint64_t name_length = LoadLE16(h + 26);
  const uint64_t extra_length = LoadLE16(h + 28);
  uint64_t data_offset = m.local_header_offset + kLocalHeaderSize + name_length + extra_length;
  if (!RangeWithin(m.local_header_offset + kLocalHeaderSize, name_length + extra_length,
                   file.size()) ||
      name_length != m.name.size() ||
      std::memcmp(h + kLocalHeaderSize, m.name.data(), name_length) != 0) {
    return Status::Corruption(where +
                              " is corrupt: its local header does not match the central directory");
  }
  if (!RangeWithin(data_offset, m.compressed_size, file.size())) {
    return Status::Corruption(where + " is truncated: its " + std::to_string(m.compressed_size) +
                              " bytes of data at offset " + std::to_string(data_offset) +
                              " run past the end of the " + std::to_string(file.size()) +
                              "-byte file");
  }
  return data_offset;
}

uint32_t Crc32(uint32_t crc, const uint8_t* data, uint64_t size) {
  return uint32_t(crc32_z(crc, data, size_t(size)));
}

// Inflates raw deflate data into exactly `out_size` bytes at `out`.
Status Inflate(const uint8_t* in, uint64_t in_size, uint8_t* out, uint64_t out_size,
               const std::string& where) {
  z_stream zs{};
  if (inflateInit2(&zs, -MAX_WBITS) != Z_OK) {
    return Status::IOError("cannot start zlib to inflate " + where);
  }
  uint64_t in_left = in_size, out_left = out_size;
  uint8_t scratch;
  bool past_declared_end = false;
  Status status;
  for (;;) {
    if (zs.avail_in == 0 && in_left > 0) {
      const uint64_t n = std::min(in_left, kZlibChunk);
      zs.next_in = const_cast<Bytef*>(in);
      zs.avail_in = uInt(n);
      in += n;
      in_left -= n;
    }
    if (zs.avail_out == 0) {
      if (out_left > 0) {
        const uint64_t n = std::min(out_left, kZlibChunk);
        zs.next_out = out;
        zs.avail_out = uInt(n);
        out += n;
        out_left -= n;
      } else {
        // The declared size is filled; one spare byte shows whether the stream has more.
        zs.next_out = &scratch;
        zs.avail_out = 1;
        past_declared_end = true;
      }
    }
    const int ret = inflate(&zs, Z_NO_FLUSH);
    if (past_declared_end && zs.avail_out == 0) {
      status = Status::Corruption(where + " inflates to more than its declared " +
                                  std::to_string(out_size) + " bytes");
      break;
    }
    if (ret == Z_STREAM_END) {
      const uint64_t produced = out_size - out_left - (past_declared_end ? 0 : zs.avail_out);
      if (produced != out_size) {
        status = Status::Corruption(where + " inflates to " + std::to_string(produced) +
                                    " bytes but declares " + std::to_string(out_size));
      }
      break;
    }
    if (ret == Z_OK) continue;
    if (ret == Z_BUF_ERROR && zs.avail_in == 0 && in_left == 0) {
      status = Status::Corruption(where + " is truncated: its deflate stream ends early");
    } else if (ret == Z_MEM_ERROR) {
      status = Status::IOError("out of memory inflating " + where);
    } else {
      status = Status::Corruption(where + " has corrupt deflate data (" +
                                  std::string(zs.msg ? zs.msg : "zlib error") + ")");
    }
    break;
  }
  inflateEnd(&zs);
  return status;
}

// The .npy image of one member, verified against its CRC: a view of the mapping when stored,
// an owned buffer when deflated.
Result<NdArray> ReadMember(const std::shared_ptr<const MappedFile>& file, const ZipMember& m,
                           std::string array_name, const std::string& where) {
  if (m.flags & (kFlagEncrypted | kFlagStrongEncryption)) {
    return Status::NotSupported(where + " is encrypted, which is not supported");
  }
  SPRIG_ASSIGN_OR_RETURN(uint64_t data_offset, MemberDataOffset(*file, m, where));
  const uint8_t* stored = file->data() + data_offset;
  if (m.uncompressed_size > kMaxArrayBytes + kDeflateSlack) {
    return Status::NotSupported(where + " declares " + std::to_string(m.uncompressed_size) +
                                " bytes, more than the 64 GiB sprig accepts for one array");
  }
  const uint8_t* image = nullptr;
  std::shared_ptr<const void> keepalive;
  if (m.method == kMethodStored) {
    if (m.compressed_size != m.uncompressed_size) {
      return Status::Corruption(where + " is stored uncompressed but declares " +
                                std::to_string(m.compressed_size) + " stored and " +
                                std::to_string(m.uncompressed_size) + " uncompressed bytes");
    }
    image = stored;
    keepalive = file;
  } else if (m.method == kMethodDeflate) {
    uint64_t limit;
    if (!CheckedMul(m.compressed_size, kMaxDeflateRatio, &limit) ||
        !CheckedAdd(limit, kDeflateSlack, &limit) || m.uncompressed_size > limit) {
      return Status::Corruption(where + " declares " + std::to_string(m.uncompressed_size) +
                                " bytes from " + std::to_string(m.compressed_size) +
                                " compressed bytes, more than deflate can produce "
                                "(refusing a possible decompression bomb)");
    }
    SPRIG_ASSIGN_OR_RETURN(std::shared_ptr<uint8_t[]> buffer,
                           AllocateBuffer(m.uncompressed_size, where));
    SPRIG_RETURN_IF_ERROR(
        Inflate(stored, m.compressed_size, buffer.get(), m.uncompressed_size, where));
    image = buffer.get();
    keepalive = std::move(buffer);
  } else {
    return Status::NotSupported(where + " uses zip compression method " + std::to_string(m.method) +
                                "; only stored (0) and deflate (8) are supported");
  }
  const uint32_t crc = Crc32(0, image, m.uncompressed_size);
  if (crc != m.crc32) {
    char text[64];
    std::snprintf(text, sizeof text, "%08x, but its data has CRC-32 %08x", m.crc32, crc);
    return Status::Corruption(where + " is corrupt: the archive records CRC-32 " + text);
  }
  return DecodeNpy(image, m.uncompressed_size, std::move(keepalive), std::move(array_name), where);
}

}  // namespace

Result<std::vector<NdArray>> ReadNpz(const std::shared_ptr<const MappedFile>& file,
                                     const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(std::vector<ZipMember> members, ReadZipDirectory(*file, path));
  std::vector<NdArray> arrays;
  arrays.reserve(members.size());
  std::unordered_set<std::string> seen;
  for (const ZipMember& m : members) {
    const std::string where = MemberWhere(path, m.name);
    constexpr std::string_view kSuffix = ".npy";
    if (m.name.size() <= kSuffix.size() ||
        m.name.compare(m.name.size() - kSuffix.size(), kSuffix.size(), kSuffix) != 0) {
      return Status::InvalidArgument(where +
                                     " is not an array: every .npz member must be named NAME.npy");
    }
    if (!seen.insert(m.name).second) {
      return Status::Corruption(path + " contains two members named '" + m.name + "'");
    }
    SPRIG_ASSIGN_OR_RETURN(NdArray array,
                           ReadMember(file, m, m.name.substr(0, m.name.size() - 4), where));
    arrays.push_back(std::move(array));
  }
  return arrays;
}

// ---------------------------------------------------------------------------------------------
// Writing.

namespace {

// 1980-01-01 00:00:00, the zip epoch: a fixed time keeps the output byte-for-byte reproducible.
constexpr uint16_t kDosTime = 0;
constexpr uint16_t kDosDate = (0 << 9) | (1 << 5) | 1;
constexpr uint16_t kVersionPlain = 20;  // 2.0: deflate
constexpr uint16_t kVersionZip64 = 45;  // 4.5: ZIP64
constexpr uint16_t kMadeByUnix = 3 << 8;
constexpr uint32_t kUnixFileMode = 0100644;  // regular file, rw-r--r--

constexpr uint64_t kIoChunk = uint64_t{4} << 20;

struct WrittenMember {
  std::string name;
  uint16_t flags;
  uint16_t method;
  uint32_t crc;
  uint64_t compressed_size;
  uint64_t uncompressed_size;
  uint64_t offset;
};

uint32_t Clip32(uint64_t v, uint64_t threshold) {
  return v >= threshold || v >= 0xffffffff ? 0xffffffff : uint32_t(v);
}

class NpzWriter {
 public:
  NpzWriter(AtomicFile* file, const NpzWriteOptions& options, const std::string& path)
      : file_(file), options_(options), path_(path) {}

  Status AddMember(const std::string& name, const std::string& header, const NdArray& array);
  Status Finish();

 private:
  bool Big(uint64_t v) const { return v >= options_.zip64_threshold || v >= 0xffffffff; }
  Status WriteStored(const std::string& header, const NdArray& array, uint32_t* crc,
                     uint64_t* written);
  Status WriteDeflated(const std::string& header, const NdArray& array, uint32_t* crc,
                       uint64_t* written);

  AtomicFile* file_;
  NpzWriteOptions options_;
  const std::string& path_;
  std::vector<WrittenMember> members_;
};

Status NpzWriter::WriteStored(const std::string& header, const NdArray& array, uint32_t* crc,
                              uint64_t* written) {
  auto bytes = reinterpret_cast<const uint8_t*>(header.data());
  *crc = Crc32(0, bytes, header.size());
  SPRIG_RETURN_IF_ERROR(file_->Write(bytes, header.size()));
  // CRC and write chunk by chunk, so each chunk is still in cache when it is written.
  const uint64_t total = array.nbytes();
  for (uint64_t done = 0; done < total;) {
    const uint64_t n = std::min(kIoChunk, total - done);
    *crc = Crc32(*crc, array.data + done, n);
    SPRIG_RETURN_IF_ERROR(file_->Write(array.data + done, n));
    done += n;
  }
  *written = header.size() + total;
  return Status::Ok();
}

Status NpzWriter::WriteDeflated(const std::string& header, const NdArray& array, uint32_t* crc,
                                uint64_t* written) {
  z_stream zs{};
  if (deflateInit2(&zs, options_.compression_level, Z_DEFLATED, -MAX_WBITS, 8,
                   Z_DEFAULT_STRATEGY) != Z_OK) {
    return Status::IOError("cannot start zlib to compress " + path_);
  }
  std::vector<uint8_t> out(kIoChunk);
  const uint64_t start = file_->size();
  Status status;
  *crc = 0;
  // Feeds one input piece (or, with Z_FINISH, the end of the stream) through deflate.
  auto pump = [&](const uint8_t* in, uint64_t size, int flush) -> Status {
    zs.next_in = const_cast<Bytef*>(in);
    zs.avail_in = uInt(size);
    for (;;) {
      zs.next_out = out.data();
      zs.avail_out = uInt(out.size());
      const int ret = deflate(&zs, flush);
      if (ret == Z_STREAM_ERROR) return Status::IOError("zlib failed compressing " + path_);
      SPRIG_RETURN_IF_ERROR(file_->Write(out.data(), out.size() - zs.avail_out));
      if (flush == Z_FINISH ? ret == Z_STREAM_END : (zs.avail_in == 0 && zs.avail_out != 0)) {
        return Status::Ok();
      }
    }
  };
  auto feed = [&](const uint8_t* data, uint64_t size) -> Status {
    for (uint64_t done = 0; done < size;) {
      const uint64_t n = std::min(kIoChunk, size - done);
      *crc = Crc32(*crc, data + done, n);
      SPRIG_RETURN_IF_ERROR(pump(data + done, n, Z_NO_FLUSH));
      done += n;
    }
    return Status::Ok();
  };
  status = feed(reinterpret_cast<const uint8_t*>(header.data()), header.size());
  if (status.ok()) status = feed(array.data, array.nbytes());
  if (status.ok()) status = pump(nullptr, 0, Z_FINISH);
  deflateEnd(&zs);
  *written = file_->size() - start;
  return status;
}

Status NpzWriter::AddMember(const std::string& name, const std::string& header,
                            const NdArray& array) {
  WrittenMember m;
  m.name = name;
  m.flags = 0;
  for (unsigned char c : name) {
    if (c >= 0x80) m.flags = kFlagUtf8;
  }
  m.method = options_.compress ? kMethodDeflate : kMethodStored;
  m.uncompressed_size = header.size() + array.nbytes();
  m.offset = file_->size();
  // The local header is written before the data, so it must choose its ZIP64 form from a
  // bound: deflate's output never exceeds about 1.001 * input + a few bytes.
  const uint64_t bound = options_.compress ? m.uncompressed_size + m.uncompressed_size / 512 + 64
                                           : m.uncompressed_size;
  const bool local_zip64 = Big(m.uncompressed_size) || Big(bound);

  std::string local;
  AppendLE32(local, kLocalHeaderSignature);
  AppendLE16(local, local_zip64 ? kVersionZip64 : kVersionPlain);
  AppendLE16(local, m.flags);
  AppendLE16(local, m.method);
  AppendLE16(local, kDosTime);
  AppendLE16(local, kDosDate);
  AppendLE32(local, 0);                             // CRC-32, patched below
  AppendLE32(local, local_zip64 ? 0xffffffff : 0);  // compressed size, patched below
  AppendLE32(local, local_zip64 ? 0xffffffff : 0);  // uncompressed size, patched below
  AppendLE16(local, uint16_t(name.size()));
  AppendLE16(local, local_zip64 ? 20 : 0);
  local += name;
  if (local_zip64) {
    AppendLE16(local, kZip64ExtraId);
    AppendLE16(local, 16);
    AppendLE64(local, 0);  // uncompressed size, patched below
    AppendLE64(local, 0);  // compressed size, patched below
  }
  SPRIG_RETURN_IF_ERROR(file_->Write(local.data(), local.size()));

  uint64_t written = 0;
  SPRIG_RETURN_IF_ERROR(options_.compress ? WriteDeflated(header, array, &m.crc, &written)
                                          : WriteStored(header, array, &m.crc, &written));
  m.compressed_size = written;
  if (!local_zip64 && Big(m.compressed_size)) {
    return Status::IOError("cannot write " + path_ + ": member '" + name +
                           "' compressed to more than its ZIP64 bound");
  }
  std::string patch;
  AppendLE32(patch, m.crc);
  if (!local_zip64) {
    AppendLE32(patch, uint32_t(m.compressed_size));
    AppendLE32(patch, uint32_t(m.uncompressed_size));
  }
  SPRIG_RETURN_IF_ERROR(file_->WriteAt(m.offset + 14, patch.data(), patch.size()));
  if (local_zip64) {
    std::string sizes;
    AppendLE64(sizes, m.uncompressed_size);
    AppendLE64(sizes, m.compressed_size);
    SPRIG_RETURN_IF_ERROR(
        file_->WriteAt(m.offset + kLocalHeaderSize + name.size() + 4, sizes.data(), sizes.size()));
  }
  members_.push_back(std::move(m));
  return Status::Ok();
}

Status NpzWriter::Finish() {
  const uint64_t directory_offset = file_->size();
  std::string directory;
  for (const WrittenMember& m : members_) {
    std::string extra;
    if (Big(m.uncompressed_size)) AppendLE64(extra, m.uncompressed_size);
    if (Big(m.compressed_size)) AppendLE64(extra, m.compressed_size);
    if (Big(m.offset)) AppendLE64(extra, m.offset);
    if (!extra.empty()) {
      std::string field;
      AppendLE16(field, kZip64ExtraId);
      AppendLE16(field, uint16_t(extra.size()));
      extra = field + extra;
    }
    const uint16_t version = extra.empty() ? kVersionPlain : kVersionZip64;
    AppendLE32(directory, kCentralHeaderSignature);
    AppendLE16(directory, kMadeByUnix | version);
    AppendLE16(directory, version);
    AppendLE16(directory, m.flags);
    AppendLE16(directory, m.method);
    AppendLE16(directory, kDosTime);
    AppendLE16(directory, kDosDate);
    AppendLE32(directory, m.crc);
    AppendLE32(directory, Clip32(m.compressed_size, options_.zip64_threshold));
    AppendLE32(directory, Clip32(m.uncompressed_size, options_.zip64_threshold));
    AppendLE16(directory, uint16_t(m.name.size()));
    AppendLE16(directory, uint16_t(extra.size()));
    AppendLE16(directory, 0);  // comment
    AppendLE16(directory, 0);  // disk
    AppendLE16(directory, 0);  // internal attributes
    AppendLE32(directory, kUnixFileMode << 16);
    AppendLE32(directory, Clip32(m.offset, options_.zip64_threshold));
    directory += m.name;
    directory += extra;
  }
  SPRIG_RETURN_IF_ERROR(file_->Write(directory.data(), directory.size()));

  const uint64_t count = members_.size();
  const uint64_t size = directory.size();
  const bool zip64 =
      Big(size) || Big(directory_offset) || count >= 0xffff || count >= options_.zip64_threshold;
  std::string end;
  if (zip64) {
    const uint64_t zip64_end_offset = file_->size();
    AppendLE32(end, kZip64EndSignature);
    AppendLE64(end, kZip64EndSize - 12);  // size of the rest of the record
    AppendLE16(end, kMadeByUnix | kVersionZip64);
    AppendLE16(end, kVersionZip64);
    AppendLE32(end, 0);  // this disk
    AppendLE32(end, 0);  // disk with the directory
    AppendLE64(end, count);
    AppendLE64(end, count);
    AppendLE64(end, size);
    AppendLE64(end, directory_offset);
    AppendLE32(end, kZip64LocatorSignature);
    AppendLE32(end, 0);  // disk with the ZIP64 end record
    AppendLE64(end, zip64_end_offset);
    AppendLE32(end, 1);  // total disks
  }
  const uint16_t count16 = zip64 ? 0xffff : uint16_t(count);
  AppendLE32(end, kEndSignature);
  AppendLE16(end, 0);
  AppendLE16(end, 0);
  AppendLE16(end, count16);
  AppendLE16(end, count16);
  AppendLE32(end, zip64 ? 0xffffffff : uint32_t(size));
  AppendLE32(end, zip64 ? 0xffffffff : uint32_t(directory_offset));
  AppendLE16(end, 0);  // comment
  return file_->Write(end.data(), end.size());
}

}  // namespace

Status WriteNpzWithOptions(const std::string& path, const std::vector<NdArray>& arrays,
                           const NpzWriteOptions& options) {
  // Everything is checked before the output is created, so a bad call leaves no file.
  std::vector<std::string> headers;
  std::unordered_set<std::string> names;
  for (const NdArray& a : arrays) {
    SPRIG_ASSIGN_OR_RETURN(std::string header, EncodeNpyHeader(a, path));
    if (!names.insert(a.name).second) {
      return Status::InvalidArgument("cannot write " + path + ": two arrays are named '" + a.name +
                                     "'");
    }
    if (a.name.size() + 4 > 0xffff) {
      return Status::InvalidArgument("cannot write " + path + ": array name '" +
                                     a.name.substr(0, 40) + "...' is too long for a zip member");
    }
    headers.push_back(std::move(header));
  }
  SPRIG_ASSIGN_OR_RETURN(AtomicFile file, AtomicFile::Create(path, options.overwrite));
  NpzWriter writer(&file, options, path);
  for (size_t i = 0; i < arrays.size(); ++i) {
    SPRIG_RETURN_IF_ERROR(writer.AddMember(arrays[i].name + ".npy", headers[i], arrays[i]));
  }
  SPRIG_RETURN_IF_ERROR(writer.Finish());
  return file.Commit();
}

}  // namespace sprig::io
