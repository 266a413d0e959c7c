// SPDX-License-Identifier: MIT
#pragma once

#include <cstdint>
#include <cstring>
#include <stdexcept>
#include <string>
#include <type_traits>
#include <vector>

#include <Eigen/Dense>

namespace rungcal {

// Bytes of results sent between the ranks of one run (core/cluster.hpp). Values are copied
// bit for bit, NaN payloads included, so a result made on another rank is identical to one
// made here. Both ends are the same build on the same kind of machine; the layout is not a
// file format and is never stored.
class ByteWriter {
 public:
  template <typename T>
  void put(const T& value) {
    static_assert(std::is_trivially_copyable_v<T>, "put() copies plain values only");
    bytes_.append(reinterpret_cast<const char*>(&value), sizeof(T));
  }
  void put_string(const std::string& s) {
    put<std::uint64_t>(s.size());
    bytes_.append(s);
  }
  void put_strings(const std::vector<std::string>& v) {
    put<std::uint64_t>(v.size());
    for (const auto& s : v) put_string(s);
  }
  template <typename T>
  void put_vector(const std::vector<T>& v) {
    static_assert(std::is_trivially_copyable_v<T>, "put_vector() copies plain values only");
    put<std::uint64_t>(v.size());
    bytes_.append(reinterpret_cast<const char*>(v.data()), v.size() * sizeof(T));
  }
  void put_matrix(const Eigen::MatrixXd& m) {
    put<std::int64_t>(m.rows());
    put<std::int64_t>(m.cols());
    bytes_.append(reinterpret_cast<const char*>(m.data()),
                  static_cast<std::size_t>(m.size()) * sizeof(double));
  }
  void put_vector(const Eigen::VectorXd& v) { put_matrix(v); }
  const std::string& bytes() const { return bytes_; }
  std::string release() { return std::move(bytes_); }

 private:
  std::string bytes_;
};

// Reads what a ByteWriter wrote, in the same order. Reading past the end is a broken
// invariant (both ends run the same code), reported as std::logic_error.
class ByteReader {
 public:
  explicit ByteReader(const std::string& bytes) : bytes_(bytes) {}
  template <typename T>
  T get() {
    static_assert(std::is_trivially_copyable_v<T>, "get() copies plain values only");
    T value;
    std::memcpy(&value, take(sizeof(T)), sizeof(T));
    return value;
  }
  std::string get_string() {
    const auto n = get<std::uint64_t>();
    return std::string(take(n), n);
  }
  std::vector<std::string> get_strings() {
    std::vector<std::string> v(get<std::uint64_t>());
    for (auto& s : v) s = get_string();
    return v;
  }
  template <typename T>
  std::vector<T> get_vector() {
    std::vector<T> v(get<std::uint64_t>());
    if (!v.empty()) std::memcpy(v.data(), take(v.size() * sizeof(T)), v.size() * sizeof(T));
    return v;
  }
  Eigen::MatrixXd get_matrix() {
    const auto rows = get<std::int64_t>();
    const auto cols = get<std::int64_t>();
    Eigen::MatrixXd m(rows, cols);
    const std::size_t n = static_cast<std::size_t>(rows * cols) * sizeof(double);
    if (n > 0) std::memcpy(m.data(), take(n), n);
    return m;
  }
  Eigen::VectorXd get_column() {
    Eigen::MatrixXd m = get_matrix();
    return Eigen::Map<Eigen::VectorXd>(m.data(), m.size());
  }
  bool at_end() const { return pos_ == bytes_.size(); }

 private:
  const char* take(std::size_t n) {
    if (n > bytes_.size() - pos_)
      throw std::logic_error("rank message shorter than its reader expects");
    const char* p = bytes_.data() + pos_;
    pos_ += n;
    return p;
  }
  const std::string& bytes_;
  std::size_t pos_ = 0;
};

}  // namespace rungcal
