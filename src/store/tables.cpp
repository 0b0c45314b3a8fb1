// An HDF5 file of named tables (the report's copy of its CSV tables), written by the store so
// that only this part knows HDF5.
#include <hdf5.h>

#include "freegap/errors.hpp"
#include "freegap/store.hpp"

namespace freegap::store {

// Every table as /tables/<name>/<column>: a float64 dataset for numeric columns, a
// variable-length UTF-8 string dataset for text columns; the attributes say what wrote the file.
void write_tables(const std::string& path,
                  const std::vector<std::pair<std::string, std::string>>& attributes,
                  const std::vector<TableData>& tables) {
  H5Eset_auto2(H5E_DEFAULT, nullptr, nullptr);
  const hid_t file = H5Fcreate(path.c_str(), H5F_ACC_EXCL, H5P_DEFAULT, H5P_DEFAULT);
  if (file < 0) throw Error("cannot create '" + path + "'");
  bool ok = true;
  const hid_t str = H5Tcopy(H5T_C_S1);
  H5Tset_size(str, H5T_VARIABLE);
  H5Tset_cset(str, H5T_CSET_UTF8);
  for (const auto& [name, value] : attributes) {
    const hid_t space = H5Screate(H5S_SCALAR);
    const hid_t a = H5Acreate2(file, name.c_str(), str, space, H5P_DEFAULT, H5P_DEFAULT);
    const char* p = value.c_str();
    ok &= a >= 0 && H5Awrite(a, str, &p) >= 0;
    H5Aclose(a);
    H5Sclose(space);
  }
  const hid_t group = H5Gcreate2(file, "tables", H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
  ok &= group >= 0;
  for (const TableData& t : tables) {
    const hid_t g = H5Gcreate2(group, t.name.c_str(), H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
    ok &= g >= 0;
    for (const TableColumn& c : t.columns) {
      const hsize_t rows = c.text ? c.texts.size() : c.numbers.size();
      const hid_t space = H5Screate_simple(1, &rows, nullptr);
      const hid_t type = c.text ? str : H5T_IEEE_F64LE;
      const hid_t d =
          H5Dcreate2(g, c.name.c_str(), type, space, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
      ok &= d >= 0;
      if (c.text) {
        std::vector<const char*> values;
        for (const std::string& v : c.texts) values.push_back(v.c_str());
        if (rows > 0) ok &= H5Dwrite(d, str, H5S_ALL, H5S_ALL, H5P_DEFAULT, values.data()) >= 0;
      } else if (rows > 0) {
        ok &= H5Dwrite(d, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, c.numbers.data()) >= 0;
      }
      H5Dclose(d);
      H5Sclose(space);
    }
    H5Gclose(g);
  }
  H5Gclose(group);
  H5Tclose(str);
  ok &= H5Fclose(file) >= 0;
  if (!ok) throw Error("writing '" + path + "' failed");
}

}  // namespace freegap::store
