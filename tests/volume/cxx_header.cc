// The public headers compile as C++ (extern "C", no C-only constructs): checked with -pedantic.
#include "brume/brv.h"
#include "brume/brv_write.h"

int main()
{
    brv_volume *v = nullptr;
    return brv_open_memory(nullptr, 0, nullptr, &v) == BRV_E_MAGIC ? 0 : 1;
}
