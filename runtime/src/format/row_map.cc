#include "format/row_map.h"

#include <bit>

namespace sprig::format {
namespace {

// Level of 0-based breadth-first node n: floor(log2(n + 1)).
uint32_t LevelOf(uint64_t n) {
  return static_cast<uint32_t>(std::bit_width(n + 1) - 1);
}

}  // namespace

RowMapInfo SubtreeMapFor(uint32_t levels) {
  RowMapInfo m;
  m.subtree = true;
  m.total_levels = levels;
  m.chunk_levels = kPathChunkLevels;
  m.hot_levels = levels <= kPathChunkLevels ? levels : (levels - 1) % kPathChunkLevels + 1;
  m.hot_rows = (uint64_t{1} << m.hot_levels) - 1;
  m.rows_per_record = (uint64_t{1} << m.chunk_levels) - 1;
  return m;
}

uint64_t RecordCount(const RowMapInfo& map, uint64_t rows) {
  if (rows <= map.hot_rows) return 0;
  if (!map.subtree) return (rows - map.hot_rows + map.rows_per_record - 1) / map.rows_per_record;
  uint64_t count = 0;
  for (uint32_t first = map.hot_levels; first < map.total_levels; first += map.chunk_levels) {
    count += uint64_t{1} << first;
  }
  return count;
}

RowLocation LocateRow(const RowMapInfo& map, uint64_t row) {
  if (!map.subtree) {
    const uint64_t r = row - map.hot_rows;
    return {r / map.rows_per_record, r % map.rows_per_record};
  }
  const uint32_t level = LevelOf(row);
  uint32_t first;
  // Records of earlier groups: 2^h + 2^(h+c) + ... for the group roots' levels.
  uint64_t before = 0;
  if (map.chunk_levels == kPathChunkLevels) {
    // The only chunk size files have (the loader checks it); it runs once per tree level for
    // every row, so the division and the sum take their closed forms with a constant c:
    // Σ_{j<g} 2^(h + c·j) = 2^h·(2^(c·g) - 1)/(2^c - 1).
    constexpr uint32_t c = kPathChunkLevels;
    const uint32_t group = (level - map.hot_levels) / c;
    first = map.hot_levels + group * c;
    before = (((uint64_t{1} << (c * group)) - 1) / ((uint64_t{1} << c) - 1)) << map.hot_levels;
  } else {
    const uint32_t group = (level - map.hot_levels) / map.chunk_levels;
    first = map.hot_levels + group * map.chunk_levels;
    for (uint32_t l = map.hot_levels; l < first; l += map.chunk_levels) before += uint64_t{1} << l;
  }
  const uint32_t rel = level - first;  // depth inside the chunk
  const uint64_t heap_id = row + 1;    // 1-based heap numbering: children of k are 2k, 2k+1
  const uint64_t root_heap = heap_id >> rel;
  const uint64_t in_level = heap_id - (root_heap << rel);
  const uint64_t local_heap = (uint64_t{1} << rel) + in_level;
  return {before + (root_heap - (uint64_t{1} << first)), local_heap - 1};
}

uint64_t RowOf(const RowMapInfo& map, uint64_t record, uint64_t local_row) {
  if (!map.subtree) return map.hot_rows + record * map.rows_per_record + local_row;
  uint32_t first = map.hot_levels;
  while (record >= (uint64_t{1} << first)) {
    record -= uint64_t{1} << first;
    first += map.chunk_levels;
  }
  const uint64_t root_heap = (uint64_t{1} << first) + record;
  const uint64_t local_heap = local_row + 1;
  const uint32_t rel = LevelOf(local_row);
  const uint64_t in_level = local_heap - (uint64_t{1} << rel);
  return ((root_heap << rel) + in_level) - 1;
}

}  // namespace sprig::format
