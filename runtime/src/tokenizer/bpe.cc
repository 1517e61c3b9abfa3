#include "tokenizer/bpe.h"

#include <queue>
#include <unordered_map>

#include "tokenizer/utf8.h"

namespace sprig::tokenizer {
namespace {

struct Symbol {
  int prev;     // -1 at the start
  int next;     // -1 at the end
  bool frozen;  // a user-defined symbol: never merged
  std::string_view piece;
};

// A candidate merge of symbols[left] and symbols[right] into a piece of `size` bytes.
struct Pair {
  int left;
  int right;
  float score;
  size_t size;
};

// The agenda's order: the higher score first, then the leftmost.
struct LowerPriority {
  bool operator()(const Pair& a, const Pair& b) const {
    return a.score < b.score || (a.score == b.score && a.left > b.left);
  }
};

class BpeEncoder {
 public:
  BpeEncoder(const Vocabulary& vocabulary, std::string_view normalized)
      : vocabulary_(vocabulary), normalized_(normalized) {}

  std::vector<Segment> Run() {
    SplitIntoSymbols();
    for (size_t i = 1; i < symbols_.size(); ++i)
      AddPair(static_cast<int>(i) - 1, static_cast<int>(i));
    while (!agenda_.empty()) {
      const Pair top = agenda_.top();
      agenda_.pop();
      if (!IsCurrent(top)) continue;
      Merge(top);
    }
    std::vector<Segment> segments;
    for (int i = symbols_.empty() ? -1 : 0; i != -1; i = symbols_[i].next) {
      Resegment(symbols_[i].piece, segments);
    }
    return segments;
  }

 private:
  void SplitIntoSymbols() {
    std::string_view rest = normalized_;
    symbols_.reserve(rest.size());
    while (!rest.empty()) {
      const size_t user_length = vocabulary_.user_symbols().LongestPrefix(rest);
      const size_t length = user_length > 0 ? user_length : OneCharLength(rest);
      const int index = static_cast<int>(symbols_.size());
      symbols_.push_back({index - 1, rest.size() > length ? index + 1 : -1, user_length > 0,
                          rest.substr(0, length)});
      rest.remove_prefix(length);
    }
  }

  // Queues the merge of two neighbours when they make a piece. An unused piece is remembered
  // with the two halves it was last seen made of, to split it again at the end.
  void AddPair(int left, int right) {
    if (left == -1 || right == -1 || symbols_[left].frozen || symbols_[right].frozen) return;
    const std::string_view piece(symbols_[left].piece.data(),
                                 symbols_[left].piece.size() + symbols_[right].piece.size());
    const int32_t id = vocabulary_.pieces().Find(piece);
    if (id < 0) return;
    agenda_.push({left, right, vocabulary_.score(id), piece.size()});
    if (vocabulary_.type(id) == PieceType::kUnused) {
      halves_[piece] = {symbols_[left].piece, symbols_[right].piece};
    }
  }

  // A queued pair is stale once either side was merged away or grew.
  bool IsCurrent(const Pair& pair) const {
    const Symbol& left = symbols_[pair.left];
    const Symbol& right = symbols_[pair.right];
    return !left.piece.empty() && !right.piece.empty() &&
           left.piece.size() + right.piece.size() == pair.size;
  }

  void Merge(const Pair& pair) {
    Symbol& left = symbols_[pair.left];
    Symbol& right = symbols_[pair.right];
    left.piece = std::string_view(left.piece.data(), left.piece.size() + right.piece.size());
    left.next = right.next;
    if (right.next >= 0) symbols_[right.next].prev = pair.left;
    right.piece = std::string_view();
    AddPair(left.prev, pair.left);
    AddPair(pair.left, left.next);
  }

  void Resegment(std::string_view piece, std::vector<Segment>& segments) const {
    const int32_t id = vocabulary_.IdOf(piece);
    const auto halves = halves_.find(piece);
    if (vocabulary_.type(id) != PieceType::kUnused || halves == halves_.end()) {
      segments.emplace_back(piece, id);
      return;
    }
    Resegment(halves->second.first, segments);
    Resegment(halves->second.second, segments);
  }

  const Vocabulary& vocabulary_;
  std::string_view normalized_;
  std::vector<Symbol> symbols_;
  std::priority_queue<Pair, std::vector<Pair>, LowerPriority> agenda_;
  std::unordered_map<std::string_view, std::pair<std::string_view, std::string_view>> halves_;
};

}  // namespace

std::vector<Segment> EncodeBpe(const Vocabulary& vocabulary, std::string_view normalized) {
  return BpeEncoder(vocabulary, normalized).Run();
}

}  // namespace sprig::tokenizer
