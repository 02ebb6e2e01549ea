# SPDX-License-Identifier: MIT
# Turns the migration scripts db/NNN_*.sql into a C array of strings so the
# schema travels inside the binary. Called by the build, not by hand.
separate_arguments(files NATIVE_COMMAND "${SQL_FILES}")
set(body "/* Generated from the db folder by cmake/embed_sql.cmake; do not edit. */\n#include <stddef.h>\nconst char *const sl_schema_migrations[] = {\n")
set(count 0)
foreach(f ${files})
  file(READ ${f} text)
  string(REPLACE "\\" "\\\\" text "${text}")
  string(REPLACE "\"" "\\\"" text "${text}")
  string(REPLACE "\n" "\\n\"\n  \"" text "${text}")
  string(APPEND body "  \"${text}\",\n")
  math(EXPR count "${count} + 1")
endforeach()
string(APPEND body "  NULL\n};\nconst size_t sl_schema_migration_count = ${count};\n")
file(WRITE ${OUT} "${body}")
