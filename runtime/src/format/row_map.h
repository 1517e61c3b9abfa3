// Where a routed tensor's rows live among a layer's records (schema/README.md, "Records").
//
// Contiguous map (leaves, experts): row r (after the hot rows) is local row r % rows_per_record
// of record r / rows_per_record.
//
// Subtree map (path trees): the top `hot_levels` levels of the tree are hot. The levels below are
// cut into groups of `chunk_levels` levels; each node at a group's first level roots one chunk
// (a record) holding its subtree's 2^chunk_levels - 1 nodes in breadth-first order. Records are
// ordered by group, then by the root's position in its level. A token's path therefore touches
// one record per group, and the levels of one group are adjacent in memory.
#pragma once

#include <cstdint>

namespace sprig::format {

struct RowMapInfo {
  bool subtree = false;
  uint64_t hot_rows = 0;         // leading rows kept in the hot section
  uint64_t rows_per_record = 1;  // contiguous: rows per record; subtree: 2^chunk_levels - 1
  uint32_t hot_levels = 0;       // subtree only
  uint32_t chunk_levels = 0;     // subtree only
  uint32_t total_levels = 0;     // subtree only: depth + 1
};

struct RowLocation {
  uint64_t record = 0;
  uint64_t local_row = 0;
};

// Hot levels and chunk size chosen for a path tree of `levels` = depth + 1 levels: groups of
// kPathChunkLevels levels from the bottom, the remainder (1..kPathChunkLevels levels) hot.
inline constexpr uint32_t kPathChunkLevels = 4;
RowMapInfo SubtreeMapFor(uint32_t levels);

// Records a map needs for `rows` rows in total (hot rows included).
uint64_t RecordCount(const RowMapInfo& map, uint64_t rows);

// Location of a row that is not hot (row >= map.hot_rows).
RowLocation LocateRow(const RowMapInfo& map, uint64_t row);

// Inverse of LocateRow.
uint64_t RowOf(const RowMapInfo& map, uint64_t record, uint64_t local_row);

}  // namespace sprig::format
