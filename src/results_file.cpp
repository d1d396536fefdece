// The HDF5 results file. Written against HDF5's C API (through the HDF5 C++ package's
// headers): the few calls needed are plainer there than in the C++ wrappers, and every
// handle is closed by a small RAII guard.
#include "apsides/results_file.h"

#include <H5Cpp.h>
#include <fmt/format.h>

#include <filesystem>
#include <stdexcept>

#include "apsides/error.h"

namespace apsides {
namespace {

class Handle {
 public:
  using Closer = herr_t (*)(hid_t);
  Handle(hid_t id, Closer closer, const std::string& what) : id_(id), closer_(closer) {
    if (id_ < 0) throw std::runtime_error("HDF5: cannot " + what);
  }
  ~Handle() {
    if (id_ >= 0) closer_(id_);
  }
  Handle(const Handle&) = delete;
  Handle& operator=(const Handle&) = delete;
  Handle(Handle&& o) noexcept : id_(o.id_), closer_(o.closer_) { o.id_ = -1; }
  Handle& operator=(Handle&&) = delete;
  operator hid_t() const { return id_; }

 private:
  hid_t id_;
  Closer closer_;
};

void check(herr_t status, const std::string& what) {
  if (status < 0) throw std::runtime_error("HDF5: cannot " + what);
}

std::string parent_of(const std::string& path) {
  const auto pos = path.find_last_of('/');
  return pos == 0 || pos == std::string::npos ? "/" : path.substr(0, pos);
}

Handle vlen_string_type() {
  Handle t(H5Tcopy(H5T_C_S1), H5Tclose, "make a string type");
  check(H5Tset_size(t, H5T_VARIABLE), "size a string type");
  check(H5Tset_cset(t, H5T_CSET_UTF8), "set UTF-8");
  return t;
}

}  // namespace

struct ResultsFile::Impl {
  hid_t file = -1;
  ~Impl() {
    if (file >= 0) H5Fclose(file);
  }

  bool exists(const std::string& path) const {
    if (path == "/") return true;
    // Each component must exist for H5Lexists not to fail.
    std::size_t pos = 1;
    while (true) {
      const std::size_t next = path.find('/', pos);
      const std::string prefix = path.substr(0, next);
      if (H5Lexists(file, prefix.c_str(), H5P_DEFAULT) <= 0) return false;
      if (next == std::string::npos) return true;
      pos = next + 1;
    }
  }
  void ensure_group(const std::string& path) {
    if (exists(path)) return;
    ensure_group(parent_of(path));
    Handle g(H5Gcreate2(file, path.c_str(), H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT), H5Gclose, "create group " + path);
  }
  void prepare_dataset(const std::string& path) {
    ensure_group(parent_of(path));
    if (exists(path)) check(H5Ldelete(file, path.c_str(), H5P_DEFAULT), "replace " + path);
  }
  void string_attr(hid_t obj, const std::string& name, const std::string& value) {
    if (H5Aexists(obj, name.c_str()) > 0) check(H5Adelete(obj, name.c_str()), "replace attribute " + name);
    Handle type = vlen_string_type();
    Handle space(H5Screate(H5S_SCALAR), H5Sclose, "make a scalar space");
    Handle a(H5Acreate2(obj, name.c_str(), type, space, H5P_DEFAULT, H5P_DEFAULT), H5Aclose, "create attribute " + name);
    const char* p = value.c_str();
    check(H5Awrite(a, type, &p), "write attribute " + name);
  }
  template <class T>
  void numeric_attr(hid_t obj, const std::string& name, hid_t type, T value) {
    if (H5Aexists(obj, name.c_str()) > 0) check(H5Adelete(obj, name.c_str()), "replace attribute " + name);
    Handle space(H5Screate(H5S_SCALAR), H5Sclose, "make a scalar space");
    Handle a(H5Acreate2(obj, name.c_str(), type, space, H5P_DEFAULT, H5P_DEFAULT), H5Aclose, "create attribute " + name);
    check(H5Awrite(a, type, &value), "write attribute " + name);
  }
  void describe(const std::string& path, const std::string& unit, const std::string& description) {
    Handle obj(H5Oopen(file, path.c_str(), H5P_DEFAULT), H5Oclose, "open " + path);
    if (!unit.empty()) string_attr(obj, "unit", unit);
    if (!description.empty()) string_attr(obj, "description", description);
  }
  void write_array(const std::string& path, hid_t type, const void* data, std::vector<hsize_t> dims) {
    prepare_dataset(path);
    Handle space(H5Screate_simple(static_cast<int>(dims.size()), dims.data(), nullptr), H5Sclose, "make a dataspace");
    Handle d(H5Dcreate2(file, path.c_str(), type, space, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT), H5Dclose,
             "create dataset " + path);
    bool empty = false;
    for (hsize_t n : dims) empty = empty || n == 0;
    if (!empty) check(H5Dwrite(d, type, H5S_ALL, H5S_ALL, H5P_DEFAULT, data), "write " + path);
  }
  Handle open_dataset(const std::string& path) const {
    if (!exists(path)) throw InputError(fmt::format("results file: {} is missing", path));
    return Handle(H5Dopen2(file, path.c_str(), H5P_DEFAULT), H5Dclose, "open " + path);
  }
  std::vector<hsize_t> dims_of(hid_t dataset) const {
    Handle space(H5Dget_space(dataset), H5Sclose, "get a dataspace");
    const int rank = H5Sget_simple_extent_ndims(space);
    std::vector<hsize_t> dims(static_cast<std::size_t>(std::max(rank, 0)));
    if (rank > 0) H5Sget_simple_extent_dims(space, dims.data(), nullptr);
    return dims;
  }
};

ResultsFile::ResultsFile(const std::string& path, Mode mode) : impl_(std::make_unique<Impl>()), path_(path) {
  H5Eset_auto2(H5E_DEFAULT, nullptr, nullptr);
  if (mode == Mode::kCreate) {
    const std::filesystem::path p(path);
    if (p.has_parent_path() && !std::filesystem::is_directory(p.parent_path()))
      throw InputError(fmt::format("{}: directory {} does not exist", path, p.parent_path().string()));
    impl_->file = H5Fcreate(path.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
    if (impl_->file < 0) throw InputError(fmt::format("{}: cannot be created as an HDF5 file", path));
    for (const char* g : {"/data", "/project", "/parameters", "/map", "/chains", "/derived", "/diagnostics"})
      impl_->ensure_group(g);
    impl_->string_attr(impl_->file, "creator", "apsides 0.1.0");
    impl_->string_attr(impl_->file, "description",
                       "apsides results: input data, project text, parameters, chains, derived chains, diagnostics");
    return;
  }
  if (!std::filesystem::exists(path)) throw InputError(fmt::format("{}: no such file", path));
  if (H5Fis_hdf5(path.c_str()) <= 0) throw InputError(fmt::format("{}: not an HDF5 file", path));
  impl_->file = H5Fopen(path.c_str(), mode == Mode::kReadWrite ? H5F_ACC_RDWR : H5F_ACC_RDONLY, H5P_DEFAULT);
  if (impl_->file < 0) throw InputError(fmt::format("{}: cannot be opened (in use by another process, or damaged)", path));
}

ResultsFile::~ResultsFile() = default;

bool ResultsFile::exists(const std::string& p) const { return impl_->exists(p); }
void ResultsFile::create_group(const std::string& p) { impl_->ensure_group(p); }

void ResultsFile::write_vector(const std::string& p, std::span<const double> v, const std::string& unit,
                               const std::string& description) {
  impl_->write_array(p, H5T_NATIVE_DOUBLE, v.data(), {v.size()});
  impl_->describe(p, unit, description);
}

void ResultsFile::write_ints(const std::string& p, std::span<const long long> v, const std::string& description) {
  impl_->write_array(p, H5T_NATIVE_LLONG, v.data(), {v.size()});
  impl_->describe(p, "", description);
}

void ResultsFile::write_matrix(const std::string& p, std::span<const double> v, std::size_t rows, std::size_t cols,
                               const std::string& unit, const std::string& description) {
  if (v.size() != rows * cols) throw std::runtime_error("write_matrix: size mismatch for " + p);
  impl_->write_array(p, H5T_NATIVE_DOUBLE, v.data(), {rows, cols});
  impl_->describe(p, unit, description);
}

void ResultsFile::write_strings(const std::string& p, const std::vector<std::string>& values,
                                const std::string& description) {
  std::vector<const char*> ptr;
  for (const auto& s : values) ptr.push_back(s.c_str());
  Handle type = vlen_string_type();
  impl_->write_array(p, type, ptr.data(), {values.size()});
  impl_->describe(p, "", description);
}

void ResultsFile::write_text(const std::string& p, const std::string& text, const std::string& description) {
  impl_->prepare_dataset(p);
  Handle type = vlen_string_type();
  Handle space(H5Screate(H5S_SCALAR), H5Sclose, "make a scalar space");
  Handle d(H5Dcreate2(impl_->file, p.c_str(), type, space, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT), H5Dclose,
           "create " + p);
  const char* c = text.c_str();
  check(H5Dwrite(d, type, H5S_ALL, H5S_ALL, H5P_DEFAULT, &c), "write " + p);
  impl_->describe(p, "", description);
}

void ResultsFile::set_attribute(const std::string& p, const std::string& name, const std::string& value) {
  Handle obj(H5Oopen(impl_->file, p.c_str(), H5P_DEFAULT), H5Oclose, "open " + p);
  impl_->string_attr(obj, name, value);
}
void ResultsFile::set_attribute(const std::string& p, const std::string& name, double value) {
  Handle obj(H5Oopen(impl_->file, p.c_str(), H5P_DEFAULT), H5Oclose, "open " + p);
  impl_->numeric_attr(obj, name, H5T_NATIVE_DOUBLE, value);
}
void ResultsFile::set_attribute(const std::string& p, const std::string& name, long long value) {
  Handle obj(H5Oopen(impl_->file, p.c_str(), H5P_DEFAULT), H5Oclose, "open " + p);
  impl_->numeric_attr(obj, name, H5T_NATIVE_LLONG, value);
}

std::vector<std::size_t> ResultsFile::shape(const std::string& p) const {
  Handle d = impl_->open_dataset(p);
  std::vector<std::size_t> out;
  for (hsize_t n : impl_->dims_of(d)) out.push_back(static_cast<std::size_t>(n));
  return out;
}

std::vector<double> ResultsFile::read_vector(const std::string& p) const {
  Handle d = impl_->open_dataset(p);
  std::size_t n = 1;
  for (hsize_t k : impl_->dims_of(d)) n *= static_cast<std::size_t>(k);
  std::vector<double> out(n);
  if (n > 0) check(H5Dread(d, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, out.data()), "read " + p);
  return out;
}

std::vector<long long> ResultsFile::read_ints(const std::string& p) const {
  Handle d = impl_->open_dataset(p);
  std::size_t n = 1;
  for (hsize_t k : impl_->dims_of(d)) n *= static_cast<std::size_t>(k);
  std::vector<long long> out(n);
  if (n > 0) check(H5Dread(d, H5T_NATIVE_LLONG, H5S_ALL, H5S_ALL, H5P_DEFAULT, out.data()), "read " + p);
  return out;
}

std::vector<std::string> ResultsFile::read_strings(const std::string& p) const {
  Handle d = impl_->open_dataset(p);
  std::size_t n = 1;
  for (hsize_t k : impl_->dims_of(d)) n *= static_cast<std::size_t>(k);
  Handle type = vlen_string_type();
  std::vector<char*> ptr(n, nullptr);
  std::vector<std::string> out;
  if (n == 0) return out;
  check(H5Dread(d, type, H5S_ALL, H5S_ALL, H5P_DEFAULT, ptr.data()), "read " + p);
  for (char* c : ptr) out.emplace_back(c ? c : "");
  Handle space(H5Dget_space(d), H5Sclose, "get a dataspace");
  H5Dvlen_reclaim(type, space, H5P_DEFAULT, ptr.data());
  return out;
}

std::string ResultsFile::read_text(const std::string& p) const {
  const auto v = read_strings(p);
  return v.empty() ? "" : v.front();
}

bool ResultsFile::has_attribute(const std::string& p, const std::string& name) const {
  if (!exists(p)) return false;
  Handle obj(H5Oopen(impl_->file, p.c_str(), H5P_DEFAULT), H5Oclose, "open " + p);
  return H5Aexists(obj, name.c_str()) > 0;
}

std::string ResultsFile::string_attribute(const std::string& p, const std::string& name) const {
  if (!has_attribute(p, name)) throw InputError(fmt::format("{}: attribute {} of {} is missing", path_, name, p));
  Handle obj(H5Oopen(impl_->file, p.c_str(), H5P_DEFAULT), H5Oclose, "open " + p);
  Handle a(H5Aopen(obj, name.c_str(), H5P_DEFAULT), H5Aclose, "open attribute " + name);
  Handle type = vlen_string_type();
  char* c = nullptr;
  check(H5Aread(a, type, &c), "read attribute " + name);
  std::string out = c ? c : "";
  H5free_memory(c);
  return out;
}

double ResultsFile::double_attribute(const std::string& p, const std::string& name) const {
  if (!has_attribute(p, name)) throw InputError(fmt::format("{}: attribute {} of {} is missing", path_, name, p));
  Handle obj(H5Oopen(impl_->file, p.c_str(), H5P_DEFAULT), H5Oclose, "open " + p);
  Handle a(H5Aopen(obj, name.c_str(), H5P_DEFAULT), H5Aclose, "open attribute " + name);
  double v = 0;
  check(H5Aread(a, H5T_NATIVE_DOUBLE, &v), "read attribute " + name);
  return v;
}

long long ResultsFile::int_attribute(const std::string& p, const std::string& name) const {
  if (!has_attribute(p, name)) throw InputError(fmt::format("{}: attribute {} of {} is missing", path_, name, p));
  Handle obj(H5Oopen(impl_->file, p.c_str(), H5P_DEFAULT), H5Oclose, "open " + p);
  Handle a(H5Aopen(obj, name.c_str(), H5P_DEFAULT), H5Aclose, "open attribute " + name);
  long long v = 0;
  check(H5Aread(a, H5T_NATIVE_LLONG, &v), "read attribute " + name);
  return v;
}

void ResultsFile::flush() { check(H5Fflush(impl_->file, H5F_SCOPE_GLOBAL), "flush " + path_); }

void ResultsFile::write_velocity_data(const VelocityData& data) {
  std::vector<double> t(data.time_days.size());
  for (std::size_t i = 0; i < t.size(); ++i) t[i] = data.time_days[i];
  write_vector("/data/time_d", t, "d", "observation time minus reference_epoch_bjd (BJD_TDB)");
  write_vector("/data/velocity_ms", data.velocity_m_s, "m/s", "radial velocity as read, converted to m/s (positive = receding)");
  write_vector("/data/uncertainty_ms", data.uncertainty_m_s, "m/s", "stated 1-sigma uncertainty");
  std::vector<long long> inst(data.instrument.begin(), data.instrument.end());
  write_ints("/data/instrument", inst, "index into /data/instrument_names");
  write_strings("/data/instrument_names", data.instrument_names, "instrument labels");
  set_attribute("/data", "reference_epoch_bjd", data.reference_epoch_bjd);
  set_attribute("/data", "description", std::string("input velocities as read (time = time_d + reference_epoch_bjd)"));
}

void ResultsFile::write_project_text(const std::string& text) {
  write_text("/project/text", text, "the project file (TOML) as read");
}

void ResultsFile::write_parameters(const std::vector<std::string>& names, const std::vector<std::string>& units,
                                   const std::vector<std::string>& priors) {
  write_strings("/parameters/names", names, "sampled parameters, in chain order");
  write_strings("/parameters/units", units, "unit of each parameter");
  write_strings("/parameters/priors", priors, "prior of each parameter");
}

void ResultsFile::create_chains(int walkers, std::size_t dim, std::uint64_t seed, const std::string& options_text) {
  const hsize_t w = static_cast<hsize_t>(walkers), d = dim;
  const hsize_t chunk_steps = std::max<hsize_t>(1, std::min<hsize_t>(256, 65536 / std::max<hsize_t>(1, w * d)));
  {
    impl_->prepare_dataset("/chains/positions");
    const hsize_t dims[3] = {0, w, d}, maxdims[3] = {H5S_UNLIMITED, w, d}, chunk[3] = {chunk_steps, w, d};
    Handle space(H5Screate_simple(3, dims, maxdims), H5Sclose, "make chain space");
    Handle plist(H5Pcreate(H5P_DATASET_CREATE), H5Pclose, "make a property list");
    check(H5Pset_chunk(plist, 3, chunk), "set chunks");
    Handle ds(H5Dcreate2(impl_->file, "/chains/positions", H5T_NATIVE_DOUBLE, space, H5P_DEFAULT, plist, H5P_DEFAULT),
              H5Dclose, "create /chains/positions");
  }
  impl_->describe("/chains/positions", "see /parameters/units", "walker positions after each step (steps x walkers x parameters)");
  {
    impl_->prepare_dataset("/chains/log_prob");
    const hsize_t dims[2] = {0, w}, maxdims[2] = {H5S_UNLIMITED, w}, chunk[2] = {chunk_steps, w};
    Handle space(H5Screate_simple(2, dims, maxdims), H5Sclose, "make log-prob space");
    Handle plist(H5Pcreate(H5P_DATASET_CREATE), H5Pclose, "make a property list");
    check(H5Pset_chunk(plist, 2, chunk), "set chunks");
    Handle ds(H5Dcreate2(impl_->file, "/chains/log_prob", H5T_NATIVE_DOUBLE, space, H5P_DEFAULT, plist, H5P_DEFAULT),
              H5Dclose, "create /chains/log_prob");
  }
  impl_->describe("/chains/log_prob", "", "log-posterior (natural log, up to a constant) of each walker after each step");
  set_attribute("/chains", "steps", 0LL);
  set_attribute("/chains", "walkers", static_cast<long long>(walkers));
  set_attribute("/chains", "seed", std::to_string(seed));
  set_attribute("/chains", "options", options_text);
  set_attribute("/chains", "description",
                std::string("ensemble sampler chains; rows beyond the 'steps' attribute are not valid"));
}

long ResultsFile::chain_steps() const { return static_cast<long>(int_attribute("/chains", "steps")); }
int ResultsFile::chain_walkers() const { return static_cast<int>(int_attribute("/chains", "walkers")); }
std::size_t ResultsFile::chain_dim() const { return shape("/chains/positions").at(2); }

void ResultsFile::append_chain_rows(const std::vector<std::vector<double>>& positions,
                                    const std::vector<std::vector<double>>& log_prob) {
  if (positions.empty()) return;
  const hsize_t start = static_cast<hsize_t>(chain_steps());
  const hsize_t n = positions.size();
  const int w = chain_walkers();
  const hsize_t d = chain_dim();
  {
    Handle ds = impl_->open_dataset("/chains/positions");
    const hsize_t ext[3] = {start + n, static_cast<hsize_t>(w), d};
    check(H5Dset_extent(ds, ext), "extend /chains/positions");
    std::vector<double> buf;
    buf.reserve(n * w * d);
    for (const auto& r : positions) buf.insert(buf.end(), r.begin(), r.end());
    Handle fspace(H5Dget_space(ds), H5Sclose, "get a dataspace");
    const hsize_t off[3] = {start, 0, 0}, cnt[3] = {n, static_cast<hsize_t>(w), d};
    check(H5Sselect_hyperslab(fspace, H5S_SELECT_SET, off, nullptr, cnt, nullptr), "select rows");
    Handle mspace(H5Screate_simple(3, cnt, nullptr), H5Sclose, "make a memory space");
    check(H5Dwrite(ds, H5T_NATIVE_DOUBLE, mspace, fspace, H5P_DEFAULT, buf.data()), "write chain rows");
  }
  {
    Handle ds = impl_->open_dataset("/chains/log_prob");
    const hsize_t ext[2] = {start + n, static_cast<hsize_t>(w)};
    check(H5Dset_extent(ds, ext), "extend /chains/log_prob");
    std::vector<double> buf;
    for (const auto& r : log_prob) buf.insert(buf.end(), r.begin(), r.end());
    Handle fspace(H5Dget_space(ds), H5Sclose, "get a dataspace");
    const hsize_t off[2] = {start, 0}, cnt[2] = {n, static_cast<hsize_t>(w)};
    check(H5Sselect_hyperslab(fspace, H5S_SELECT_SET, off, nullptr, cnt, nullptr), "select rows");
    Handle mspace(H5Screate_simple(2, cnt, nullptr), H5Sclose, "make a memory space");
    check(H5Dwrite(ds, H5T_NATIVE_DOUBLE, mspace, fspace, H5P_DEFAULT, buf.data()), "write log-prob rows");
  }
}

void ResultsFile::write_checkpoint(const SamplerState& state) {
  const std::size_t w = state.log_prob.size();
  const std::size_t d = w ? state.positions.size() / w : 0;
  // Fixed-shape datasets rewritten in place at each checkpoint.
  auto put = [&](const std::string& p, const void* data, hid_t type, std::vector<hsize_t> dims, const std::string& desc) {
    if (!exists(p)) {
      impl_->write_array(p, type, data, dims);
      impl_->describe(p, "", desc);
    } else {
      Handle ds = impl_->open_dataset(p);
      check(H5Dwrite(ds, type, H5S_ALL, H5S_ALL, H5P_DEFAULT, data), "write " + p);
    }
  };
  put("/chains/state/positions", state.positions.data(), H5T_NATIVE_DOUBLE, {w, d}, "walker positions at the last checkpoint");
  put("/chains/state/log_prob", state.log_prob.data(), H5T_NATIVE_DOUBLE, {w}, "log-posterior at the last checkpoint");
  std::vector<long long> acc(state.accepted.begin(), state.accepted.end());
  put("/chains/state/accepted", acc.data(), H5T_NATIVE_LLONG, {w}, "accepted moves per walker so far");
  set_attribute("/chains/state", "step", static_cast<long long>(state.step));
  set_attribute("/chains/state", "description",
                std::string("sampler state; the random streams are a function of (seed, step, walker), so this and the seed "
                            "are the whole state"));
  set_attribute("/chains", "steps", static_cast<long long>(state.step));
  flush();
}

SamplerState ResultsFile::read_checkpoint() {
  if (!exists("/chains/state/positions"))
    throw InputError(fmt::format("{}: no sampler checkpoint to resume (the run stopped before its first checkpoint)", path_));
  SamplerState s;
  s.step = static_cast<long>(int_attribute("/chains/state", "step"));
  s.positions = read_vector("/chains/state/positions");
  s.log_prob = read_vector("/chains/state/log_prob");
  const auto acc = read_ints("/chains/state/accepted");
  s.accepted.assign(acc.begin(), acc.end());
  // Drop rows past the checkpoint (a write interrupted before its flush).
  const auto sh = shape("/chains/positions");
  if (sh.at(0) < static_cast<std::size_t>(s.step))
    throw InputError(fmt::format("{}: the chain holds {} steps but the checkpoint says {}", path_, sh[0], s.step));
  if (sh[0] > static_cast<std::size_t>(s.step)) {
    Handle ds = impl_->open_dataset("/chains/positions");
    const hsize_t ext[3] = {static_cast<hsize_t>(s.step), sh[1], sh[2]};
    check(H5Dset_extent(ds, ext), "trim /chains/positions");
    Handle dl = impl_->open_dataset("/chains/log_prob");
    const hsize_t ext2[2] = {static_cast<hsize_t>(s.step), sh[1]};
    check(H5Dset_extent(dl, ext2), "trim /chains/log_prob");
  }
  set_attribute("/chains", "steps", static_cast<long long>(s.step));
  return s;
}

std::vector<double> ResultsFile::read_chain_rows(long first, long last, long stride, std::vector<double>* log_prob) const {
  const auto sh = shape("/chains/positions");
  if (first < 1 || last < first || static_cast<std::size_t>(last) > sh[0] || stride < 1) return {};
  const hsize_t n = static_cast<hsize_t>((last - first) / stride + 1);
  const hsize_t w = sh[1], d = sh[2];
  std::vector<double> out(n * w * d);
  {
    Handle ds = impl_->open_dataset("/chains/positions");
    Handle fspace(H5Dget_space(ds), H5Sclose, "get a dataspace");
    const hsize_t off[3] = {static_cast<hsize_t>(first - 1), 0, 0}, str[3] = {static_cast<hsize_t>(stride), 1, 1},
                  cnt[3] = {n, w, d};
    check(H5Sselect_hyperslab(fspace, H5S_SELECT_SET, off, str, cnt, nullptr), "select rows");
    Handle mspace(H5Screate_simple(3, cnt, nullptr), H5Sclose, "make a memory space");
    check(H5Dread(ds, H5T_NATIVE_DOUBLE, mspace, fspace, H5P_DEFAULT, out.data()), "read chain rows");
  }
  if (log_prob) {
    log_prob->assign(n * w, 0.0);
    Handle ds = impl_->open_dataset("/chains/log_prob");
    Handle fspace(H5Dget_space(ds), H5Sclose, "get a dataspace");
    const hsize_t off[2] = {static_cast<hsize_t>(first - 1), 0}, str[2] = {static_cast<hsize_t>(stride), 1}, cnt[2] = {n, w};
    check(H5Sselect_hyperslab(fspace, H5S_SELECT_SET, off, str, cnt, nullptr), "select rows");
    Handle mspace(H5Screate_simple(2, cnt, nullptr), H5Sclose, "make a memory space");
    check(H5Dread(ds, H5T_NATIVE_DOUBLE, mspace, fspace, H5P_DEFAULT, log_prob->data()), "read log-prob rows");
  }
  return out;
}

std::vector<double> ResultsFile::read_chain_row(long step) const { return read_chain_rows(step, step, 1); }

}  // namespace apsides
