/*
 * The page shell's keyboard access and upload messages (loaded by Dash from assets/).
 *
 * Result tabs: Dash's tabs are plain <div>s. Each tab list gets the tablist / tab / tabpanel
 * roles, aria-selected and a roving tabindex: Tab reaches the selected tab, ArrowLeft /
 * ArrowRight (Home / End) move between tabs, Enter or Space selects the tab with the focus.
 *
 * Uploads: an upload box refuses a file over its size limit or of a type it does not take before
 * anything reaches the server, and says nothing. Here the same checks say why, in the box's
 * message area (limits from window.plannerShell, written by webapp.app.index_string).
 */
(function () {
    "use strict";

    // ---- tabs --------------------------------------------------------------------------------

    function setAttr(element, name, value) {
        if (element.getAttribute(name) !== value) { element.setAttribute(name, value); }
    }

    function dressTabs(container) {
        var tabs = Array.prototype.filter.call(container.children, function (child) {
            return child.classList.contains("tab");
        });
        if (!tabs.length) { return; }
        var base = container.id || "tabs";
        var panel = container.parentElement &&
            container.parentElement.querySelector(":scope > .tab-content");
        setAttr(container, "role", "tablist");
        if (!container.hasAttribute("aria-label")) { setAttr(container, "aria-label", "Results"); }
        var selected = null;
        tabs.forEach(function (tab, i) {
            var isSelected = tab.classList.contains("tab--selected");
            setAttr(tab, "role", "tab");
            setAttr(tab, "id", base + "-tab-" + i);
            setAttr(tab, "aria-selected", isSelected ? "true" : "false");
            setAttr(tab, "aria-controls", base + "-panel");
            if (isSelected) { selected = tab; }
        });
        var focused = tabs.indexOf(document.activeElement);
        tabs.forEach(function (tab) {
            var keep = focused >= 0 ? tab === document.activeElement : tab === selected;
            setAttr(tab, "tabindex", keep ? "0" : "-1");
        });
        if (panel) {
            setAttr(panel, "role", "tabpanel");
            setAttr(panel, "id", base + "-panel");
            setAttr(panel, "tabindex", "0");
            if (selected) { setAttr(panel, "aria-labelledby", selected.id); }
        }
    }

    function dressAll() {
        document.querySelectorAll(".tab-container").forEach(dressTabs);
    }

    document.addEventListener("keydown", function (event) {
        var tab = event.target;
        if (!tab || !tab.classList || !tab.classList.contains("tab")) { return; }
        var list = tab.parentElement;
        if (!list || list.getAttribute("role") !== "tablist") { return; }
        var tabs = Array.prototype.filter.call(list.children, function (child) {
            return child.classList.contains("tab");
        });
        var i = tabs.indexOf(tab);
        var next = null;
        if (event.key === "ArrowRight" || event.key === "ArrowDown") {
            next = tabs[(i + 1) % tabs.length];
        } else if (event.key === "ArrowLeft" || event.key === "ArrowUp") {
            next = tabs[(i - 1 + tabs.length) % tabs.length];
        } else if (event.key === "Home") {
            next = tabs[0];
        } else if (event.key === "End") {
            next = tabs[tabs.length - 1];
        } else if (event.key === "Enter" || event.key === " " || event.key === "Spacebar") {
            event.preventDefault();
            tab.click();
            return;
        } else {
            return;
        }
        event.preventDefault();
        tabs.forEach(function (other) { setAttr(other, "tabindex", other === next ? "0" : "-1"); });
        next.focus();
    });

    document.addEventListener("focusout", function () {
        // Focus left the tab list: Tab comes back to the selected tab.
        window.setTimeout(dressAll, 0);
    });

    // ---- uploads -----------------------------------------------------------------------------

    function uploads() {
        return (window.plannerShell && window.plannerShell.uploads) || [];
    }

    function megabytes(bytes) {
        return (bytes / 1e6).toLocaleString("en", {maximumFractionDigits: 1}) + " MB";
    }

    function accepted(file, accept) {
        if (!accept) { return true; }
        var name = (file.name || "").toLowerCase();
        var type = (file.type || "").toLowerCase();
        return accept.split(",").some(function (token) {
            token = token.trim().toLowerCase();
            if (!token) { return false; }
            if (token.charAt(0) === ".") { return name.slice(-token.length) === token; }
            if (token.slice(-2) === "/*") { return type.indexOf(token.slice(0, -1)) === 0; }
            return type === token;
        });
    }

    function refusal(file, box) {
        var name = file.name || "The file";
        if (box.max_size > 0 && file.size > box.max_size) {
            return name + " was not loaded: it is " + megabytes(file.size) + ", more than the " +
                megabytes(box.limit > 0 ? box.limit : box.max_size) +
                " a file may have here. Nothing was changed.";
        }
        if (!accepted(file, box.accept)) {
            var kinds = box.accept.split(",").map(function (t) { return t.trim(); })
                .filter(function (t) { return t.charAt(0) === "."; });
            return name + " was not loaded: this box takes only " + kinds.join(" or ") +
                " files. Nothing was changed.";
        }
        return null;
    }

    function boxOf(element) {
        var found = null;
        uploads().forEach(function (box) {
            var root = document.getElementById(box.id);
            if (root && element && root.contains(element)) { found = box; }
        });
        return found;
    }

    function say(box, text) {
        var clientside = window.dash_clientside;
        if (box.message && clientside && clientside.set_props &&
                document.getElementById(box.message)) {
            clientside.set_props(box.message, {
                children: {
                    type: "Div",
                    namespace: "dash_html_components",
                    props: {children: text, className: "message problem", role: "alert"},
                },
            });
        } else {
            window.alert(text);
        }
    }

    function check(files, target) {
        var box = boxOf(target);
        if (!box || !files || !files.length) { return; }
        var text = refusal(files[0], box);
        if (text) { say(box, text); }
    }

    document.addEventListener("change", function (event) {
        var input = event.target;
        if (input && input.type === "file") { check(input.files, input); }
    }, true);
    document.addEventListener("drop", function (event) {
        check(event.dataTransfer && event.dataTransfer.files, event.target);
    }, true);

    // ---- start -------------------------------------------------------------------------------

    var observer = new MutationObserver(dressAll);
    function start() {
        observer.observe(document.body, {
            childList: true, subtree: true, attributes: true, attributeFilter: ["class"],
        });
        dressAll();
    }
    if (document.readyState === "loading") {
        document.addEventListener("DOMContentLoaded", start);
    } else {
        start();
    }
})();
