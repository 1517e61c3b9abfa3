#include "io/mapped_file.h"

#include "base/status_macros.h"
#include "platform/mapping.h"

namespace sprig::io {

Result<std::shared_ptr<const MappedFile>> MappedFile::Open(const std::string& path) {
  SPRIG_ASSIGN_OR_RETURN(std::unique_ptr<platform::FileMapping> mapping,
                         platform::FileMapping::Open(path));
  const uint8_t* data = mapping->data();
  const uint64_t size = mapping->size();
  return std::shared_ptr<const MappedFile>(new MappedFile(data, size, std::move(mapping)));
}

std::shared_ptr<const MappedFile> MappedFile::FromMemory(const uint8_t* data, uint64_t size) {
  return std::shared_ptr<const MappedFile>(new MappedFile(data, size, nullptr));
}

MappedFile::MappedFile(const uint8_t* data, uint64_t size,
                       std::unique_ptr<platform::FileMapping> mapping)
    : data_(data), size_(size), mapping_(std::move(mapping)) {}

MappedFile::~MappedFile() = default;

}  // namespace sprig::io
