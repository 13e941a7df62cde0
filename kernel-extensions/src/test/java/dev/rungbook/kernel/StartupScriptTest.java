package dev.rungbook.kernel;

import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.util.List;
import org.junit.jupiter.api.Test;

class StartupScriptTest {
    @Test
    void importsOnlyPackagesThatExist() {
        List<String> imports = StartupScript.imports(getClass().getClassLoader());
        assertTrue(imports.contains("import dev.rungbook.tensor.*;"), imports.toString());
        assertTrue(imports.contains("import dev.rungbook.progress.*;"), imports.toString());
        assertTrue(imports.contains("import tech.tablesaw.api.*;"), imports.toString());
        assertTrue(imports.contains("import org.knowm.xchart.*;"), imports.toString());
        assertTrue(imports.contains("import java.util.*;"), imports.toString());
        assertTrue(imports.contains(StartupScript.NOTEBOOK_HELPERS), imports.toString());
        for (String pkg : StartupScript.API_PACKAGES) {
            boolean present = getClass().getClassLoader().getResource(pkg.replace('.', '/')) != null;
            assertTrue(present == imports.contains("import " + pkg + ".*;"), pkg);
        }
        assertFalse(StartupScript.packageExists(getClass().getClassLoader(), "dev.rungbook.no_such_package"));
    }
}
